"""The examples in docs/sites.md run as written."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

DOC = Path(__file__).resolve().parents[1] / "docs" / "sites.md"
BLOCKS = re.findall(r"```python\n(.*?)```", DOC.read_text(encoding="utf-8"), re.S)


@pytest.mark.parametrize("code", BLOCKS, ids=[f"block{i}" for i in range(len(BLOCKS))])
def test_docs_example_runs(code):
    exec(compile(code, str(DOC), "exec"), {"__name__": "docs_sites"})


def test_docs_have_examples():
    assert BLOCKS
