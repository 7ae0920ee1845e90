"""Helpers for the bad-input, fault and determinism tests: a tiny study built in tmp_path.

Not a test module (no ``test_`` prefix); imported by ``tests/test_bad_input_*.py``,
``test_faults.py``, ``test_determinism.py`` and ``test_fuzz_study.py``.
"""

from __future__ import annotations

import shutil
from pathlib import Path
from typing import Any

import numpy as np

from conftest import CRS, make_tiny, write_grid  # noqa: F401  (make_tiny is re-exported for the fault tests)

X0, Y0 = 500000.0, 5000000.0

STUDY = """
title = "tiny"
[demand]
grid = "pop.tif"
[sites]
candidates = "tiny.gpkg:candidates"
existing = "tiny.gpkg:stations"
cost_field = "cost"
label_field = "parcel_id"
exclude = [{ layer = "tiny.gpkg:flood", setback = "50 m", where = "zone_class == 'A'" }]
study_area = "tiny.gpkg:area"
[service]
distance = "800 m"
[model]
kind = "cover-most"
sites = 2
"""


def edit(text: str, *pairs: tuple[str, str]) -> str:
    """Replace each ``old`` by ``new`` in ``text``; every ``old`` must be there (a typo fails loudly)."""
    for old, new in pairs:
        assert old in text, f"{old!r} is not in the study text"
        text = text.replace(old, new)
    return text


def write_study(folder: Path, text: str = STUDY, name: str = "study.toml") -> Path:
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def invoke(*args: str) -> Any:
    """Run the CLI in-process; returns click's Result."""
    from click.testing import CliRunner

    from geocover.cli import cli

    return CliRunner().invoke(cli, list(args))


def assert_clean_exit(result: Any, code: int, *needles: str) -> str:
    """Exit ``code``, no traceback, and every needle (case-insensitive) in the output."""
    out = result.output
    assert "Traceback" not in out, out
    if result.exception is not None:
        assert isinstance(result.exception, SystemExit), repr(result.exception)
    assert result.exit_code == code, (result.exit_code, out)
    for needle in needles:
        assert needle.lower() in out.lower(), (needle, out)
    return out


def snapshot(folder: Path) -> dict[str, bytes]:
    """Every file under ``folder`` (hidden ones included) -> its bytes."""
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def copy_tree(src: Path, dst: Path) -> Path:
    shutil.copytree(src, dst)
    return dst


def far_grid(folder: Path, dx: float = 50000.0) -> Path:
    """A population grid of 400 people, ``dx`` metres east of every site of the tiny study."""
    return write_grid(folder / "pop.tif", np.ones((20, 20), "float32"), X0 + dx, Y0, 100.0, crs=CRS)
