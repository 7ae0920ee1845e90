"""Study files and tool outputs: unknown keys, wrong types, paths, outputs that would hit inputs,
and the security rules (TOML only, filters parsed never evaluated, no escaping the output folder).

Decision on "two outputs pointing at the same file": a study has one output folder and writes
three fixed names into it, so two outputs cannot collide; what can go wrong is an output that
is also an input (e.g. ``out = "."`` with a study file named after its own GeoPackage).  That is
refused before anything is written and the input is left byte-identical.  An output folder that
merely holds inputs (``out = "."``) is fine.
"""

from __future__ import annotations

import builtins
import json

import pytest

from _studykit import STUDY, assert_clean_exit, edit, invoke, snapshot, write_study


def _run(tiny, text=STUDY, name="study.toml", out=None):
    study = write_study(tiny["dir"], text, name)
    return invoke("study", str(study), *(["--out", str(out)] if out else []))


# ----------------------------------------------------------------------------- keys and types


@pytest.mark.parametrize(
    "old,new,needles",
    [
        ('title = "tiny"', 'titel = "tiny"', ["top level", "unknown key 'titel'", "did you mean 'title'"]),
        ("sites = 2", "sites = 2\ntimelimit = 5", ["[model]", "unknown key 'timelimit'", "did you mean 'time_limit'"]),
        ('setback = "50 m"', 'setbak = "50 m"', ["'exclude'", "unknown key 'setbak'", "did you mean 'setback'"]),
        ("[service]", "[servce]", ["top level", "'servce'", "did you mean 'service'", "no [service] section"]),
    ],
    ids=["top", "model", "exclusion", "section"],
)
def test_unknown_keys_are_named_with_a_suggestion(tiny, old, new, needles):
    assert_clean_exit(_run(tiny, edit(STUDY, (old, new))), 2, *needles)


@pytest.mark.parametrize(
    "old,new,needles",
    [
        ("sites = 2", 'sites = "many"', ["[model]", "'sites'", "expected a number"]),
        ("sites = 2", "sites = 2.5", ["'sites'", "whole number"]),
        ("sites = 2", "sites = true", ["'sites'", "expected a number"]),
        ('title = "tiny"', "title = {a = 1}", ["'title'", "expected text, got dict"]),
        ('title = "tiny"', "title = 1979-05-27", ["'title'", "expected text, got date"]),
        ('distance = "800 m"', 'distance = "800 parsecs"', ["[service] distance", "unknown unit 'parsecs'", "km"]),
        ('distance = "800 m"', "distance = [800]", ["[service] distance", "expected a distance such as '5 km', got list"]),
        ('kind = "cover-most"', 'kind = "cover-mots"', ["'kind'", "did you mean 'cover-most'"]),
        ('candidates = "tiny.gpkg:candidates"', "candidates = 5", ["'candidates'", "expected a layer"]),
        ('candidates = "tiny.gpkg:candidates"', 'candidates = {layer = "c"}', ["'candidates'", "needs a 'path' key"]),
    ],
)
def test_wrong_types_are_named(tiny, old, new, needles):
    assert_clean_exit(_run(tiny, edit(STUDY, (old, new))), 2, *needles)


def test_a_section_given_as_a_value_is_named(tiny):
    text = edit(STUDY, ('title = "tiny"', 'title = "tiny"\nsites = 3'), ("[sites]", "[sitez]"))
    assert_clean_exit(_run(tiny, text), 2, "'sites' must be a section", "unknown key 'sitez'")


def test_every_problem_is_reported_at_once(tiny):
    text = edit(STUDY, ('title = "tiny"', 'titel = "tiny"'), ("sites = 2", 'sites = "x"'), ('"pop.tif"', '"nope.tif"'))
    assert_clean_exit(_run(tiny, text), 2, "3 problem(s)", "titel", "'sites'", "nope.tif")


def test_relative_path_that_does_not_resolve_names_where_it_looked(tiny):
    result = _run(tiny, edit(STUDY, ('"pop.tif"', '"data/pop.tif"')))
    # relative to the study file's folder, not to the working directory
    assert_clean_exit(result, 2, "'grid'", str(tiny["dir"] / "data" / "pop.tif"), "does not exist")


def test_paths_resolve_against_the_study_file_not_the_working_directory(tiny, tmp_path_factory, monkeypatch):
    monkeypatch.chdir(tmp_path_factory.mktemp("elsewhere"))
    assert_clean_exit(_run(tiny, out=tiny["dir"] / "out"), 0)


def test_not_utf8_and_not_toml(tiny):
    (tiny["dir"] / "latin.toml").write_bytes('title = "Tr\xe4ume"\n'.encode("latin-1"))
    assert_clean_exit(invoke("study", str(tiny["dir"] / "latin.toml")), 2, "not a UTF-8 text file")
    assert_clean_exit(_run(tiny, "import os\nos.system('echo hi')\n", "code.toml"), 2, "not valid TOML")


# ----------------------------------------------------------------------------- outputs and inputs


def test_output_that_is_an_input_is_refused_and_the_input_kept(tiny):
    before = snapshot(tiny["dir"])
    # a study file named tiny.toml writes tiny.gpkg: with out = "." that is its own input layer file
    result = _run(tiny, edit(STUDY, ('title = "tiny"', 'title = "tiny"\nout = "."')), name="tiny.toml")
    assert_clean_exit(result, 1, "tiny.gpkg is also an input", "choose another output folder")
    after = snapshot(tiny["dir"])
    assert {k: v for k, v in after.items() if k != "tiny.toml"} == before  # inputs byte-identical, nothing new


def test_output_folder_that_holds_inputs_is_fine(tiny):
    before = snapshot(tiny["dir"])
    assert_clean_exit(_run(tiny, edit(STUDY, ('title = "tiny"', 'title = "tiny"\nout = "."'))), 0)
    after = snapshot(tiny["dir"])
    assert all(after[k] == v for k, v in before.items())
    assert {"study.gpkg", "report.html", "manifest.json"} <= set(after)


def test_tool_output_over_any_input_is_refused(tiny):
    before = snapshot(tiny["dir"])
    result = invoke("run", "demand-grid", "--grid", str(tiny["grid"]), "--clip", f"{tiny['gpkg']}:area", "--out", str(tiny["gpkg"]))
    assert_clean_exit(result, 1, "tiny.gpkg is also an input")
    assert snapshot(tiny["dir"]) == before


@pytest.mark.parametrize("tool,args", [
    ("screen-sites", ["--candidates", "{gpkg}:candidates"]),
    ("demand-grid", ["--grid", "{grid}", "--clip", "{gpkg}:area"]),
    ("coverage", ["--grid", "{grid}", "--candidates", "{gpkg}:candidates", "--distance", "800 m"]),
])
def test_a_tool_can_write_over_its_own_previous_output(tiny, tool, args):
    args = [a.format(gpkg=tiny["gpkg"], grid=tiny["grid"]) for a in args]
    out = tiny["dir"] / "result.gpkg"
    assert_clean_exit(invoke("run", tool, *args, "--out", str(out)), 0)
    assert_clean_exit(invoke("run", tool, *args, "--out", str(out)), 0)


def test_output_paths_cannot_escape_through_dotdot(tiny, monkeypatch):
    result = _run(tiny, edit(STUDY, ('title = "tiny"', 'title = "tiny"\nout = "../escape"')))
    assert_clean_exit(result, 2, "'out'", "would leave the folder", "absolute path")
    assert not (tiny["dir"].parent / "escape").exists()
    monkeypatch.chdir(tiny["dir"])
    result = invoke("run", "demand-grid", "--grid", "pop.tif", "--out", "../escape.gpkg")
    assert_clean_exit(result, 2, "'out'", "would leave the output folder")
    assert not (tiny["dir"].parent / "escape.gpkg").exists()


def test_an_absolute_output_path_may_be_anywhere(tiny, tmp_path_factory):
    elsewhere = tmp_path_factory.mktemp("elsewhere") / "deep" / "results"
    assert_clean_exit(_run(tiny, edit(STUDY, ('title = "tiny"', f'title = "tiny"\nout = "{elsewhere}"'))), 0)
    assert (elsewhere / "study.gpkg").is_file()


# ----------------------------------------------------------------------------- filters are data


@pytest.mark.parametrize("where", [
    "__import__('os').system('touch PWNED')",
    "zone_class == 'A' or 1; import os",
    "zone_class == 'A'.__class__",
    "eval('1')",
    "zone_class == `ls`",
])
def test_filters_that_look_like_code_are_refused_by_the_grammar(tiny, where):
    result = _run(tiny, edit(STUDY, ("zone_class == 'A'", where.replace('"', '\\"'))))
    assert_clean_exit(result, 2, "[sites] filter")
    assert not list(tiny["dir"].rglob("PWNED"))


def test_filters_and_study_files_are_never_evaluated(tiny, monkeypatch):
    def forbidden(*args, **kwargs):
        raise AssertionError("eval/exec/compile called on user data")

    for name in ("eval", "exec"):
        monkeypatch.setattr(builtins, name, forbidden)
    text = edit(STUDY, ("zone_class == 'A'", "zone_class in ('A', 'AE') and not zone_class == 'X'"))
    assert_clean_exit(_run(tiny, text), 0)
    params = json.loads((tiny["dir"] / "out" / "manifest.json").read_text())["parameters"]
    assert params["sites"]["exclude"][0]["where"] == "zone_class in ('A', 'AE') and not zone_class == 'X'"


def test_filter_on_a_field_that_does_not_exist_lists_the_fields(tiny):
    result = _run(tiny, edit(STUDY, ("zone_class == 'A'", "zoneclass == 'A'")))
    assert_clean_exit(result, 1, "filter", "layer flood has no field 'zoneclass'", "zone_class")


def test_sites_and_budget_together_is_a_usage_error_before_any_work(tiny):
    assert_clean_exit(_run(tiny, edit(STUDY, ("sites = 2", "sites = 2\nbudget = 3"))), 2, "[model]", "sites", "budget")


def test_infeasible_floor_says_what_to_change(tiny):
    out = assert_clean_exit(_run(tiny, edit(STUDY, ('kind = "cover-most"', 'kind = "cover-twice"\nfirst_floor = "100 %"'))), 0)
    assert "first_floor" in out
