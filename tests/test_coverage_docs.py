"""The examples in docs/coverage.md run (in order, sharing one namespace)."""

from __future__ import annotations

import contextlib
import io
import re
from pathlib import Path

DOC = Path(__file__).resolve().parents[1] / "docs" / "coverage.md"


def test_coverage_doc_examples_run():
    blocks = re.findall(r"```python\n(.*?)```", DOC.read_text(), flags=re.S)
    assert len(blocks) >= 4
    namespace: dict = {}
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        for block in blocks:
            exec(compile(block, str(DOC), "exec"), namespace)
    printed = out.getvalue().splitlines()
    assert "[True, True, False]" in printed  # the antimeridian example says what it prints
    assert "[2]" in printed
    assert len(namespace["circles"]) == 3 and len(namespace["drive"]) == 1
