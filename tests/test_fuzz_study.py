"""Fuzz the study file and the tool command line (hypothesis): whatever the values, `geocover study`
and `geocover run TOOL` exit 0, 1 or 2 with a message, never with a traceback or an unexpected
(non-geocover) exception.

Bounded: 30 examples of one or two changed keys on the tiny study, each a
CLI run in-process.  Values are drawn per key type (paths from a pool of real
and missing layers, distances with odd units and signs, shares, counts incl.
nan and inf, filters from the filter alphabet) mixed with values of any TOML
type.  Sizes are kept small on purpose (no 1 m lattice, no 10^6 threads) so a
run stays well under a second; the output folder is always given on the
command line, so no fuzzed value decides where files are written.
"""

from __future__ import annotations

import datetime as dt
import json
import math
import shutil

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from _studykit import invoke, make_tiny

from geocover.toolbox import options

BASE = {
    "title": "tiny",
    "demand": {"grid": "pop.tif"},
    "sites": {
        "candidates": "tiny.gpkg:candidates",
        "existing": "tiny.gpkg:stations",
        "cost_field": "cost",
        "exclude": [{"layer": "tiny.gpkg:flood", "setback": "50 m", "where": "zone_class == 'A'"}],
        "study_area": "tiny.gpkg:area",
    },
    "service": {"distance": "800 m"},
    "model": {"kind": "cover-most", "sites": 2, "time_limit": "5 s"},
}

KEYS = {
    "demand": [p.name for p in options.DEMAND],
    "sites": [p.name for p in options.SITES],
    "service": [p.name for p in options.SERVICE],
    "model": [p.name for p in options.MODEL],
    "": ["title", "crs"],
}
TYPES = {p.name: type(p).__name__ for group in (options.DEMAND, options.SITES, options.SERVICE, options.MODEL, options.CRS) for p in group}

# ----------------------------------------------------------------------------- value strategies

LAYERS = ["tiny.gpkg:candidates", "tiny.gpkg:area", "tiny.gpkg:flood", "tiny.gpkg:stations", "tiny.gpkg",
          "tiny.gpkg:nope", "pop.tif", "missing.gpkg", "", ".", "/", "tiny.gpkg:"]
RASTERS = ["pop.tif", "tiny.gpkg", "missing.tif", ".", "study.toml"]
FIELDS = ["cost", "parcel_id", "status", "zone_class", "name", "nope", "", "1abc", "a b"]
UNITS = ["", " m", " km", " mi", " ft", " min", " s", " h", " %", " parsec", "km"]
MAGNITUDES = [-1.0, 0.0, 50.0, 800.0, 5000.0, 1e7, math.nan, math.inf]
FILTER_ALPHABET = "zone_clas=!<>()'\", AXin ndotr0123.;"

anything = st.recursive(
    st.one_of(
        st.none(),  # dropped by the writer: the key is left out
        st.booleans(),
        st.integers(-3, 100),
        st.floats(allow_nan=True, allow_infinity=True, width=32),
        st.text(st.characters(exclude_categories=("Cs",)), max_size=12),  # no lone surrogates: TOML cannot hold them
        st.dates(min_value=dt.date(1900, 1, 1), max_value=dt.date(2100, 1, 1)),
    ),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.sampled_from(["layer", "path", "setback", "where", "x"]), inner, max_size=3),
    max_leaves=5,
)
quantity = st.one_of(
    st.sampled_from(MAGNITUDES),
    st.builds(lambda x, u: f"{x:g}{u}", st.sampled_from(MAGNITUDES), st.sampled_from(UNITS)),
)
count = st.one_of(st.integers(-2, 12), st.sampled_from([math.nan, math.inf, 2.5, "3", True]))
filters = st.one_of(st.text(alphabet=FILTER_ALPHABET, max_size=30),
                    st.sampled_from(["zone_class in ('A', 'AE')", "not zone_class == 'X'", "zone_class >= 3", "(zone_class == 'A'"]))
exclusion = st.fixed_dictionaries(
    {"layer": st.sampled_from(LAYERS)},
    optional={"setback": quantity, "where": filters, "name": st.text(st.characters(exclude_categories=("Cs",)), max_size=5), "bogus": st.integers()},
)

BY_TYPE = {
    "VectorLayer": st.sampled_from(LAYERS),
    "Raster": st.sampled_from(RASTERS),
    "FieldName": st.sampled_from(FIELDS),
    "Distance": quantity,
    "Duration": quantity,
    "Share": st.one_of(quantity, st.sampled_from(["95 %", "0.5", 1.5, 100, "%"])),
    "Number": count,
    "Flag": st.sampled_from([True, False, "yes", "maybe", 1]),
    "IntList": st.one_of(st.lists(st.integers(-1, 9), max_size=3), st.sampled_from(["1,2", "a", [1.5]])),
    "ExclusionList": st.one_of(st.lists(exclusion, max_size=2), st.sampled_from(LAYERS)),
    "Choice": st.sampled_from(["cover-all", "cover-most", "cover-target", "cover-twice", "planar", "geodesic", "network",
                               "count", "density_km2", "zero", "error", "hex", "square", "kept", "optional", "highs",
                               "cbc", "spread", "inside", "fraction", "CBC", "nonsense"]),
    "Text": st.sampled_from(["EPSG:32626", "EPSG:4326", "EPSG:2263", "nonsense", "", "t"]),
}


@st.composite
def changes(draw):
    out = []
    for _ in range(draw(st.integers(1, 2))):
        section = draw(st.sampled_from(list(KEYS)))
        key = draw(st.one_of(st.sampled_from(KEYS[section]), st.sampled_from(["bogus", "sitse"])))
        typed = BY_TYPE.get(TYPES.get(key, ""), anything)
        value = draw(st.one_of(typed, typed, typed, anything))  # mostly well-typed, sometimes anything
        out.append((section, key, value))
    return out


# ----------------------------------------------------------------------------- a tiny TOML writer


def _toml_value(value):
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf") if math.isinf(value) else repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str):
        # JSON string escapes are TOML basic-string escapes; keep non-ASCII raw (JSON would write surrogate pairs)
        return json.dumps(value, ensure_ascii=False).replace("\x7f", "\\u007f")
    if isinstance(value, dt.date):
        return value.isoformat()
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value if v is not None) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k} = {_toml_value(v)}" for k, v in value.items() if v is not None) + "}"
    raise TypeError(type(value))


def to_toml(doc):
    lines = [f"{k} = {_toml_value(v)}" for k, v in doc.items() if not isinstance(v, dict) and v is not None]
    for name, table in doc.items():
        if isinstance(table, dict):
            lines.append(f"[{name}]")
            lines += [f"{k} = {_toml_value(v)}" for k, v in table.items() if v is not None]
    return "\n".join(lines) + "\n"


# ----------------------------------------------------------------------------- the fuzz run


@pytest.fixture(scope="module")
def layers(tmp_path_factory):
    return make_tiny(tmp_path_factory.mktemp("fuzz"))


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(changes())
def test_any_study_file_ends_in_a_message_never_a_traceback(layers, change):
    import copy

    doc = copy.deepcopy(BASE)
    for section, key, value in change:
        target = doc if section == "" else doc[section]
        if value is None:
            target.pop(key, None)
        else:
            target[key] = value
    folder = layers["dir"]
    study = folder / "study.toml"
    study.write_text(to_toml(doc), encoding="utf-8")
    out = folder / "out"
    try:
        result = invoke("study", str(study), "--out", str(out))
    finally:
        shutil.rmtree(out, ignore_errors=True)
    text = result.output
    context = f"\n--- study file ---\n{study.read_text()}\n--- output ---\n{text}"
    assert result.exception is None or isinstance(result.exception, SystemExit), repr(result.exception) + context
    assert result.exit_code in (0, 1, 2), context
    assert "Traceback" not in text, context
    if result.exit_code:
        assert "error" in text.lower(), context
        assert "unexpected error" not in text, context  # every failure is one of geocover's own, with its message
    else:
        assert "sites chosen" in text, context


# ----------------------------------------------------------------------------- the same for `geocover run TOOL --name value`

TOOL_BASE = {"grid": "pop.tif", "candidates": "tiny.gpkg:candidates", "distance": "800 m", "sites": "2"}
TOOL_IDS = ["cover-most", "cover-all", "coverage", "screen-sites", "demand-grid", "audit", "tradeoff"]


@st.composite
def tool_args(draw):
    from geocover.toolbox.registry import get_tool

    tool = get_tool(draw(st.sampled_from(TOOL_IDS)))
    names = [p.name for p in tool.params if p.name != "out"]
    args = {k: v for k, v in TOOL_BASE.items() if k in names}
    for _ in range(draw(st.integers(0, 3))):
        key = draw(st.one_of(st.sampled_from(names), st.sampled_from(["bogus", "site"])))
        value = draw(BY_TYPE.get(TYPES.get(key, ""), anything))
        if value is None:
            args.pop(key, None)
        else:  # on the command line every value is text
            args[key] = value if isinstance(value, str) else _toml_value(value)
    return tool, args


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(case=tool_args())
def test_any_tool_command_line_ends_in_a_message_never_a_traceback(layers, case, monkeypatch):
    tool, args = case
    monkeypatch.chdir(layers["dir"])  # relative paths on the command line start at the working directory
    out = "fuzz_out.gpkg" if any(p.name == "out" and p.type_name == "output file" for p in tool.params) else "fuzz_out"
    argv = ["run", tool.id] + [a for k, v in args.items() for a in (f"--{k.replace('_', '-')}", v)] + ["--out", out]
    try:
        result = invoke(*argv)
    finally:
        target = layers["dir"] / out
        shutil.rmtree(target, ignore_errors=True) if target.is_dir() else target.unlink(missing_ok=True)
    context = f"\n--- argv ---\n{argv}\n--- output ---\n{result.output}"
    assert result.exception is None or isinstance(result.exception, SystemExit), repr(result.exception) + context
    assert result.exit_code in (0, 1, 2), context
    assert "Traceback" not in result.output and "unexpected error" not in result.output, context
    if result.exit_code:
        assert "error" in result.output.lower(), context
