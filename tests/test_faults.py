"""Faults: Ctrl-C during a study, a solver stopped by its time limit, coverage too big for memory.

Each fault must end in a clear result or message, never a traceback, and must
never leave a half-written output folder behind.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from _studykit import STUDY, assert_clean_exit, edit, invoke, make_tiny, snapshot, write_study

# ----------------------------------------------------------------------------- interrupt


def _interrupt_at(monkeypatch, module: str, name: str, after: int = 0) -> dict[str, int]:
    """Make ``module.name`` raise KeyboardInterrupt on its call number ``after + 1``."""
    import importlib

    mod = importlib.import_module(module)
    real = getattr(mod, name)
    calls = {"n": 0}

    def fake(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] > after:
            raise KeyboardInterrupt
        return real(*args, **kwargs)

    monkeypatch.setattr(mod, name, fake)
    return calls


# where a Ctrl-C can land while a study writes its three files
WRITE_POINTS = [
    ("geocover.report", "write_report"),  # after the GeoPackage is complete, before the report
    ("geocover.toolbox.results", "build_manifest"),  # after the GeoPackage and the report
    ("geocover.layers", "write_layers"),  # before anything is written
]


@pytest.fixture(scope="module")
def previous_output(tmp_path_factory):
    """The tiny study's complete output, made once; tests copy it next to their own inputs."""
    from geocover.toolbox.study import run_study

    folder = make_tiny(tmp_path_factory.mktemp("previous"))["dir"]
    run_study(write_study(folder), folder / "out")
    return folder / "out"


@pytest.mark.parametrize("module,name", WRITE_POINTS, ids=[n for _, n in WRITE_POINTS])
def test_interrupt_while_writing_keeps_the_previous_complete_output(tiny, monkeypatch, previous_output, module, name):
    import shutil

    from geocover.toolbox.study import run_study

    study = write_study(tiny["dir"])
    out = shutil.copytree(previous_output, tiny["dir"] / "out")
    before = snapshot(out)
    assert sorted(before) == ["manifest.json", "report.html", "study.gpkg"]
    # a second run with another model would change every file; interrupt it while writing
    write_study(tiny["dir"], edit(STUDY, ("sites = 2", "sites = 1")))
    calls = _interrupt_at(monkeypatch, module, name)
    with pytest.raises(KeyboardInterrupt):
        run_study(study, out)
    assert calls["n"] == 1, "the interrupt point was never reached"
    # byte-identical previous output, and no temporary or staging files left behind
    assert snapshot(out) == before


def test_leftovers_of_a_killed_run_are_removed_by_the_next_run(tiny, previous_output):
    """kill -9 while writing leaves a staging folder and temporary files; the next run into the folder
    removes those of this host whose process is gone, and nothing else."""
    import os
    import shutil
    import subprocess
    import sys

    from geocover.layers import owner_tag
    from geocover.toolbox.study import run_study

    study = write_study(tiny["dir"])
    out = shutil.copytree(previous_output, tiny["dir"] / "out")
    host = owner_tag().rsplit("-", 1)[0]
    dead = int(subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True,
                              text=True, check=True).stdout)
    gone = [out / f".study.staging.{host}-{dead}.k3j2", out / f".study.staging.{host}-{dead}.x81q"]
    kept = [out / f".study.staging.{host}-{os.getppid()}.a1b2",  # a process that runs
            out / f".study.staging.otherhost-{dead}.c3d4",  # another machine's, on a shared disk
            out / ".study.staging.e5f6", out / "notes.study.staging.txt"]  # not ours to judge
    for path in gone + kept:
        if path.suffix in (".gpkg", ".txt"):
            path.write_bytes(b"partial")
        else:
            path.mkdir()
            (path / "study.gpkg").write_bytes(b"partial")
    run_study(study, out)
    assert not any(p.exists() for p in gone)
    assert all(p.exists() for p in kept)
    assert {"manifest.json", "report.html", "study.gpkg"} <= {p.name for p in out.iterdir()}


def test_a_temporary_file_left_beside_an_output_is_removed_by_the_next_write(tmp_path):
    import subprocess
    import sys

    from geocover.layers import atomic_output, owner_tag

    host = owner_tag().rsplit("-", 1)[0]
    dead = int(subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True,
                              text=True, check=True).stdout)
    left = tmp_path / f".sites.{host}-{dead}.q9w8.tmp.gpkg"
    other = tmp_path / f".roads.{host}-{dead}.q9w8.tmp.gpkg"  # another output's: its own next write clears it
    for path in (left, other):
        path.write_bytes(b"partial")
    with atomic_output(tmp_path / "sites.gpkg") as tmp:
        tmp.write_bytes(b"complete")
    assert (tmp_path / "sites.gpkg").read_bytes() == b"complete"
    assert not left.exists() and other.exists()


def test_interrupt_into_an_empty_folder_leaves_nothing(tiny, monkeypatch):
    from geocover.toolbox.study import run_study

    study = write_study(tiny["dir"])
    out = tiny["dir"] / "fresh"
    _interrupt_at(monkeypatch, "geocover.report", "write_report")
    with pytest.raises(KeyboardInterrupt):
        run_study(study, out)
    assert not out.exists() or list(out.rglob("*")) == []


def test_interrupt_during_solving_through_the_cli_says_so(tiny, monkeypatch):
    study = write_study(tiny["dir"])
    _interrupt_at(monkeypatch, "geocover.toolbox.pipeline", "solve")
    result = invoke("study", str(study), "--out", str(tiny["dir"] / "out"))
    out = assert_clean_exit(result, 130, "interrupted")
    assert not (tiny["dir"] / "out").exists() or list((tiny["dir"] / "out").rglob("*")) == [], out


def test_the_commit_rolls_forward_when_interrupted_between_renames(tiny, monkeypatch, previous_output):
    """A Ctrl-C between the final renames must not leave a mix of old and new files."""
    import os
    import shutil

    from geocover.toolbox.study import run_study

    study = write_study(tiny["dir"])
    out = shutil.copytree(previous_output, tiny["dir"] / "out")
    old_manifest = json.loads((out / "manifest.json").read_text())
    write_study(tiny["dir"], edit(STUDY, ("sites = 2", "sites = 1")))
    real = os.replace
    calls = {"n": 0}

    def replace(src, dst):
        real(src, dst)
        if Path(dst).parent == out:
            calls["n"] += 1
            if calls["n"] == 1:  # the first output is in place; the other two are not yet
                raise KeyboardInterrupt

    monkeypatch.setattr(os, "replace", replace)
    with pytest.raises(KeyboardInterrupt):
        run_study(study, out)
    monkeypatch.setattr(os, "replace", real)
    assert sorted(p.name for p in out.iterdir()) == ["manifest.json", "report.html", "study.gpkg"]
    new_manifest = json.loads((out / "manifest.json").read_text())
    assert new_manifest["plan"] != old_manifest["plan"]
    # the GeoPackage agrees with the new manifest: one new site plus the kept station
    import pyogrio

    plan_sites = pyogrio.read_dataframe(out / "study.gpkg", layer="plan_sites")
    assert sorted(plan_sites["site_id"]) == sorted(new_manifest["chosen_sites"])


# ----------------------------------------------------------------------------- solver time limit


def _hard_instance(tmp_path: Path) -> Path:
    """3000 weighted demand points and 400 candidates at random on a 10 km square, as GeoPackages.

    With a 1.3 km limit each point is within reach of about 19 candidates;
    MCLP with 30 sites on it is not proven optimal by CBC within 5 s on this
    machine (measured while writing the test), so a 0.3 s limit always stops it.
    """
    import geopandas as gpd

    rng = np.random.default_rng(1)
    x0, y0 = 500000.0, 5000000.0
    dxy = rng.random((3000, 2)) * 10000 + [x0, y0]
    sxy = rng.random((400, 2)) * 10000 + [x0, y0]
    gpkg = tmp_path / "hard.gpkg"
    gpd.GeoDataFrame({"people": rng.integers(1, 100, len(dxy)).astype(float)},
                     geometry=gpd.points_from_xy(dxy[:, 0], dxy[:, 1]), crs="EPSG:32626").to_file(gpkg, layer="homes")
    gpd.GeoDataFrame({"parcel_id": [f"C{i}" for i in range(len(sxy))]},
                     geometry=gpd.points_from_xy(sxy[:, 0], sxy[:, 1]), crs="EPSG:32626").to_file(gpkg, layer="parcels")
    study = tmp_path / "hard.toml"
    study.write_text(
        'title = "hard"\n[demand]\npoints = "hard.gpkg:homes"\npopulation = "people"\n'
        '[sites]\ncandidates = "hard.gpkg:parcels"\nlabel_field = "parcel_id"\n'
        '[service]\ndistance = "1.3 km"\n[model]\nkind = "cover-most"\nsites = 30\ntime_limit = "0.3 s"\n',
        encoding="utf-8",
    )
    return study


def test_time_limit_reached_writes_the_best_plan_flagged_with_its_gap(tmp_path):
    import pyogrio

    study = _hard_instance(tmp_path)
    out = tmp_path / "out"
    result = invoke("study", str(study), "--out", str(out))
    text = assert_clean_exit(result, 0, "gap")
    manifest = json.loads((out / "manifest.json").read_text())
    plan = manifest["plan"]
    assert plan["status"] in ("feasible", "heuristic"), plan
    assert f"status {plan['status']}" in text
    # a real, positive gap between the plan and a proven bound above it (MCLP maximises)
    assert plan["gap"] is not None and 0 < plan["gap"] < 1
    assert plan["bound"] > plan["objective"] > 0
    assert plan["sites_chosen"] == 30
    # the plan is written in full and says what it covers: re-check by brute force
    sites = pyogrio.read_dataframe(out / "hard.gpkg", layer="plan_sites")
    homes = pyogrio.read_dataframe(tmp_path / "hard.gpkg", layer="homes")
    assert len(sites) == 30
    sxy = np.column_stack([sites.geometry.x, sites.geometry.y])
    hxy = np.column_stack([homes.geometry.x, homes.geometry.y])
    dist = np.hypot(hxy[:, None, 0] - sxy[None, :, 0], hxy[:, None, 1] - sxy[None, :, 1])
    covered = homes["people"].to_numpy()[(dist <= 1300.0).any(axis=1)].sum()
    assert covered == pytest.approx(plan["people_covered"]) == pytest.approx(plan["objective"])
    report = (out / "report.html").read_text(encoding="utf-8")
    assert plan["status"] in report


# ----------------------------------------------------------------------------- memory budget


def _big_grid_study(tmp_path: Path, extra: str = "", cells: int = 200) -> Path:
    """A ``cells`` x ``cells`` grid (40 000 people points by default) and 100 candidates that all reach everyone."""
    import geopandas as gpd

    from conftest import write_grid

    x0, y0 = 500000.0, 5000000.0
    write_grid(tmp_path / "pop.tif", np.ones((cells, cells), "float32"), x0, y0, 100.0)
    g = np.linspace(2000, 18000, 10)
    gx, gy = np.meshgrid(g + x0, g + y0)
    gpd.GeoDataFrame(geometry=gpd.points_from_xy(gx.ravel(), gy.ravel()), crs="EPSG:32626").to_file(
        tmp_path / "c.gpkg", layer="c"
    )
    study = tmp_path / "big.toml"
    study.write_text(
        f'[demand]\ngrid = "pop.tif"\n{extra}\n[sites]\ncandidates = "c.gpkg:c"\n'
        '[service]\ndistance = "40 km"\nmemory_gb = 0.01\n[model]\nkind = "cover-all"\n',
        encoding="utf-8",
    )
    return study


def test_coverage_too_big_for_the_memory_budget_is_refused_with_a_coarsening_that_fits(tmp_path):
    import re

    from geocover.coverage import BYTES_PER_PAIR

    study = _big_grid_study(tmp_path)
    result = invoke("study", str(study), "--out", str(tmp_path / "out"))
    text = assert_clean_exit(result, 1, "memory budget", "coarsen", "memory_budget_gb")
    # 40 000 points x 100 sites = 4 000 000 pairs (every site reaches every point: exact, not sampled)
    assert "4,000,000" in text
    factor = int(re.search(r"by a factor of (\d+)", text).group(1))
    need = 4_000_000 * BYTES_PER_PAIR / 1e9
    assert factor == int(np.ceil(np.sqrt(need / 0.01)))  # the smallest f with need / f**2 <= budget
    assert not (tmp_path / "out").exists()  # refused before anything was written
    # the factor it names does fit: the same study coarsened by it runs
    study = _big_grid_study(tmp_path, f"coarsen = {factor}")
    result = invoke("study", str(study), "--out", str(tmp_path / "out"))
    assert_clean_exit(result, 0, "status optimal")


def test_geodesic_coverage_also_honours_the_memory_budget(tmp_path):
    study = _big_grid_study(tmp_path, cells=100)  # 1 000 000 pairs: 15 MB, over the 10 MB budget
    study.write_text(study.read_text().replace("[service]\n", '[service]\nmetric = "geodesic"\n'))
    result = invoke("study", str(study), "--out", str(tmp_path / "out"))
    assert_clean_exit(result, 1, "memory budget")


def test_interrupt_during_a_solve_stops_the_solver_process(monkeypatch):
    """Ctrl-C while CBC runs in its forked child must not leave the child solving on.

    On a terminal the child gets the SIGINT too; in a notebook (the kernel is
    interrupted alone) or any embedding that raises KeyboardInterrupt in the
    parent, the child kept running until its own time limit.  The interrupt is
    raised deterministically in the parent's first wait for the child.
    """
    import multiprocessing
    import multiprocessing.connection
    import time

    import scipy.sparse as sp

    import geocover as gc

    rng = np.random.default_rng(5)
    # big enough (> 20 000 nonzeros) for the models to run CBC in a forked child
    reach = gc.Reach.from_sparse(sp.random(3000, 400, density=0.03, random_state=rng, format="csr"),
                                 weight=rng.integers(1, 50, 3000).astype(float))
    real_poll = multiprocessing.connection.Connection.poll

    def poll(self, timeout=0.0):
        if multiprocessing.active_children():  # the solver child is running: the user presses Ctrl-C
            raise KeyboardInterrupt
        return real_poll(self, timeout)

    monkeypatch.setattr(multiprocessing.connection.Connection, "poll", poll)
    with pytest.raises(KeyboardInterrupt):
        gc.cover_most(reach, sites=20, time_limit=30)
    monkeypatch.setattr(multiprocessing.connection.Connection, "poll", real_poll)
    deadline = time.monotonic() + 5
    while multiprocessing.active_children() and time.monotonic() < deadline:
        time.sleep(0.05)
    assert multiprocessing.active_children() == []


def test_disk_full_while_writing_keeps_the_previous_output_and_says_so(tiny, monkeypatch, previous_output):
    import errno
    import shutil

    import geocover.report

    out = shutil.copytree(previous_output, tiny["dir"] / "out")
    before = snapshot(out)
    write_study(tiny["dir"], edit(STUDY, ("sites = 2", "sites = 1")))

    def full(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(geocover.report, "write_report", full)
    result = invoke("study", str(tiny["dir"] / "study.toml"), "--out", str(out))
    text = assert_clean_exit(result, 1, "No space left on device", str(out), "previous output")
    assert "unexpected error" not in text
    assert snapshot(out) == before


def test_output_folder_that_cannot_be_made_is_named(tiny):
    blocker = tiny["dir"] / "a_file"
    blocker.write_text("not a folder")
    # the output folder would have to be made inside a file
    result = invoke("study", str(write_study(tiny["dir"])), "--out", str(blocker / "out"))
    assert_clean_exit(result, 1, "cannot write into the output folder", str(blocker / "out"), "--out")
