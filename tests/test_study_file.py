"""Study files: every problem reported at once, named by key and section."""

from __future__ import annotations

import pytest

from geocover.errors import StudyFileError
from geocover.toolbox.study import load_study


def _write(tmp_path, text):
    path = tmp_path / "study.toml"
    path.write_text(text, encoding="utf-8")
    return path


GOOD = """
title = "t"
[demand]
grid = "pop.tif"
[sites]
candidates = "tiny.gpkg:candidates"
[service]
distance = "1 km"
[model]
kind = "cover-all"
"""


def test_good_study_resolves_paths_against_its_folder(tiny):
    study = load_study(_write(tiny["dir"], GOOD))
    assert study.sections["demand"]["grid"] == tiny["dir"] / "pop.tif"
    assert study.sections["sites"]["candidates"].path == tiny["dir"] / "tiny.gpkg"
    assert study.sections["service"]["distance"] == 1000.0
    assert study.out == tiny["dir"] / "out"


def test_all_problems_at_once(tiny):
    text = GOOD.replace('distance = "1 km"', 'distance = "1 parsec"\nspeeed_field = "x"').replace(
        'title = "t"', 'title = "t"\nouts = "x"'
    )
    with pytest.raises(StudyFileError) as info:
        load_study(_write(tiny["dir"], text))
    msg = str(info.value)
    assert "3 problem(s)" in msg
    assert "'speeed_field'" in msg and "[service]" in msg and "did you mean 'speed_field'" in msg
    assert "'outs'" in msg and "top level" in msg
    assert "parsec" in msg


def test_wrong_type_is_named(tiny):
    with pytest.raises(StudyFileError, match=r"\[model\] parameter 'sites': expected a number"):
        load_study(_write(tiny["dir"], GOOD.replace('kind = "cover-all"', 'kind = "cover-most"\nsites = "many"')))


def test_missing_input_file_is_named(tiny):
    with pytest.raises(StudyFileError, match="nothere.tif does not exist"):
        load_study(_write(tiny["dir"], GOOD.replace("pop.tif", "nothere.tif")))


def test_invalid_toml_is_reported_with_the_file(tiny):
    with pytest.raises(StudyFileError, match="not valid TOML"):
        load_study(_write(tiny["dir"], "[demand\ngrid = 1"))


def test_section_that_is_not_a_table(tiny):
    with pytest.raises(StudyFileError, match=r"'demand' must be a section"):
        load_study(_write(tiny["dir"], 'demand = "pop.tif"\n[sites]\n[service]\ndistance = "1 km"\n'))


def test_output_cannot_escape_through_dotdot(tiny):
    with pytest.raises(StudyFileError, match="would leave the folder"):
        load_study(_write(tiny["dir"], 'out = "../../elsewhere"\n' + GOOD))


def test_threads_and_processes_are_study_keys_and_reach_the_run(tiny, monkeypatch):
    from geocover import network, sites
    from geocover.toolbox import pipeline

    text = GOOD.replace('candidates = "tiny.gpkg:candidates"', 'candidates = "tiny.gpkg:candidates"\nscreen_threads = 1')
    text = text.replace('distance = "1 km"', 'distance = "1 km"\nroad_processes = 2')
    study = load_study(_write(tiny["dir"], text))
    assert study.sections["sites"]["screen_threads"] == 1 and study.sections["service"]["road_processes"] == 2
    seen = {}
    monkeypatch.setattr(sites, "screen_sites", lambda *a, **kw: seen.setdefault("threads", kw["threads"]))
    monkeypatch.setattr(network, "reach_network", lambda *a, **kw: seen.setdefault("workers", kw["workers"]))
    pipeline.load_sites(study.sections["sites"], None, None)
    pipeline.build_reach({**study.sections["service"], "metric": pipeline.ServiceMetric.NETWORK, "roads": "r",
                          "time": 60.0}, None, None, None)
    assert seen == {"threads": 1, "workers": 2}
    with pytest.raises(StudyFileError, match=r"\[sites\] parameter 'screen_threads': must be at least 1"):
        load_study(_write(tiny["dir"], text.replace("screen_threads = 1", "screen_threads = 0")))
