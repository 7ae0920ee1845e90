"""Faults: Ctrl-C during a study, a solver stopped by its time limit, coverage too big for memory.

Each fault must end in a clear result or message, never a traceback, and must
never leave a half-written output folder behind.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from _studykit import STUDY, assert_clean_exit, edit, invoke, snapshot, write_study

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
    ("geocover.toolbox.pipeline", "build_manifest"),  # after the GeoPackage and the report
    ("geocover.layers", "write_layers"),  # before anything is written
]


@pytest.mark.parametrize("module,name", WRITE_POINTS, ids=[n for _, n in WRITE_POINTS])
def test_interrupt_while_writing_keeps_the_previous_complete_output(tiny, monkeypatch, module, name):
    from geocover.toolbox.study import run_study

    study = write_study(tiny["dir"])
    out = tiny["dir"] / "out"
    run_study(study, out)
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


def test_the_commit_rolls_forward_when_interrupted_between_renames(tiny, monkeypatch):
    """A Ctrl-C between the final renames must not leave a mix of old and new files."""
    import os

    from geocover.toolbox.study import run_study

    study = write_study(tiny["dir"])
    out = tiny["dir"] / "out"
    run_study(study, out)
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
