"""Helpers for the bad-input, fault and determinism tests: a tiny study built in tmp_path.

Not a test module (no ``test_`` prefix); imported by ``tests/test_bad_input_*.py``,
``test_faults.py``, ``test_determinism.py`` and ``test_fuzz_study.py``.
"""

from __future__ import annotations

import shutil
from pathlib import Path
from typing import Any

import numpy as np

from conftest import CRS, write_grid

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


def make_tiny(folder: Path) -> dict[str, Path]:
    """The layers of conftest's ``tiny`` fixture, for fixtures of wider scope (same data, same seed)."""
    import geopandas as gpd
    from shapely.geometry import Point, box

    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(7)
    pop = rng.integers(0, 30, size=(20, 20)).astype("float32")
    pop[:3, :3] = -1.0
    grid = write_grid(folder / "pop.tif", pop, X0, Y0, 100.0)
    gpkg = folder / "tiny.gpkg"
    gpd.GeoDataFrame(
        {"parcel_id": ["P1", "P2", "P3", "P4"], "cost": [1.0, 1.0, 2.0, 1.0]},
        geometry=[Point(X0 + 300, Y0 + 300), Point(X0 + 1700, Y0 + 300), Point(X0 + 1000, Y0 + 1000), Point(X0 + 1700, Y0 + 1700)],
        crs=CRS,
    ).to_file(gpkg, layer="candidates")
    gpd.GeoDataFrame({"station_id": ["S1"], "status": ["kept"], "cost": [0.0]}, geometry=[Point(X0 + 300, Y0 + 1700)], crs=CRS).to_file(gpkg, layer="stations")
    gpd.GeoDataFrame(
        {"zone_class": ["A", "X"]},
        geometry=[box(X0 + 900, Y0 + 900, X0 + 1100, Y0 + 1100), box(X0 + 1600, Y0 + 200, X0 + 1800, Y0 + 400)],
        crs=CRS,
    ).to_file(gpkg, layer="flood")
    gpd.GeoDataFrame({"name": ["district"]}, geometry=[box(X0, Y0, X0 + 2000, Y0 + 2000)], crs=CRS).to_file(gpkg, layer="area")
    return {"dir": folder, "grid": grid, "gpkg": gpkg}
