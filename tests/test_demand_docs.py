"""The examples in docs/demand.md run as written (from the repository root, as the doc says)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DOC = ROOT / "docs" / "demand.md"
BLOCKS = re.findall(r"```python\n(.*?)```", DOC.read_text(encoding="utf-8"), re.S)


@pytest.mark.skipif(
    not (ROOT / "sample_layers" / "tarrow.gpkg").exists()
    or not (ROOT / "sample_layers" / "tarrow_population_100m.tif").exists(),
    reason="the doc's example reads sample_layers/, which is not in this checkout",
)
@pytest.mark.parametrize("code", BLOCKS, ids=[f"block{i}" for i in range(len(BLOCKS))])
def test_docs_example_runs(code, monkeypatch):
    monkeypatch.chdir(ROOT)
    exec(compile(code, str(DOC), "exec"), {"__name__": "docs_demand"})


def test_docs_have_examples():
    assert BLOCKS
