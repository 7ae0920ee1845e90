"""Parameter types: the same converter for CLI strings, study-file values and Python objects."""

from __future__ import annotations

from pathlib import Path

import pytest

from geocover.choices import ModelKind
from geocover.errors import ParameterError
from geocover.toolbox.params import (
    Choice,
    Context,
    Distance,
    Duration,
    ExclusionList,
    Flag,
    IntList,
    Number,
    OutputFolder,
    OutputPath,
    Share,
    VectorLayer,
)
from geocover.units import parse_distance, parse_duration, parse_fraction

CTX = Context()


@pytest.mark.parametrize(
    "text, metres",
    [
        ("5 km", 5000.0),
        ("5km", 5000.0),
        ("800 m", 800.0),
        # 1 mi = 1609.344 m exactly (International Yard and Pound Agreement, 1959)
        ("1 mi", 1609.344),
        ("1000 ft", 304.8),
        (250, 250.0),
        (2.5e3, 2500.0),
    ],
)
def test_distance_units(text, metres):
    assert parse_distance(text) == pytest.approx(metres, rel=1e-12)


def test_duration_and_share_units():
    assert parse_duration("8 min") == 480.0
    assert parse_duration("240 s") == 240.0
    assert parse_duration("1.5 h") == 5400.0
    assert parse_fraction("95 %") == pytest.approx(0.95)
    assert parse_fraction(95) == pytest.approx(0.95)
    assert parse_fraction(0.95) == pytest.approx(0.95)


@pytest.mark.parametrize("bad", ["5 furlongs", "km 5", "", True, [5]])
def test_distance_errors_name_the_parameter(bad):
    with pytest.raises(ParameterError) as info:
        Distance("limit").convert(bad, CTX)
    assert info.value.param == "limit"
    assert "limit" in str(info.value)


def test_converting_twice_is_converting_once():
    for param, raw in (
        (Distance("d"), "5 km"),
        (Duration("t"), "8 min"),
        (Share("s"), "90 %"),
        (Number("n", minimum=1, integer=True), "3"),
        (Choice("k", choices=ModelKind), "cover-all"),
        (Flag("f"), "yes"),
        (IntList("c"), "1, 2,3"),
    ):
        once = param.convert(raw, CTX)
        assert param.convert(once, CTX) == once


def test_zero_or_negative_limits_are_refused():
    with pytest.raises(ParameterError, match="more than 0"):
        Distance("distance").convert("0 km", CTX)
    with pytest.raises(ParameterError, match="more than 0"):
        Duration("time").convert("-3 min", CTX)
    assert Distance("setback", allow_zero=True).convert(0, CTX) == 0.0


def test_share_above_100_percent_is_refused():
    with pytest.raises(ParameterError, match="between 0 % and 100 %"):
        Share("share").convert("120 %", CTX)


def test_choice_lists_valid_values_and_suggests():
    with pytest.raises(ParameterError) as info:
        Choice("kind", choices=ModelKind).convert("cover-mots", CTX)
    text = str(info.value)
    assert "cover-all" in text and "cover-twice" in text and "did you mean 'cover-most'" in text


def test_number_range_and_integer():
    p = Number("sites", minimum=0, integer=True)
    assert p.convert("4", CTX) == 4
    with pytest.raises(ParameterError, match="whole number"):
        p.convert("4.5", CTX)
    with pytest.raises(ParameterError, match="at least 0"):
        p.convert(-1, CTX)


def test_vector_layer_resolves_relative_to_base(tmp_path):
    (tmp_path / "a.gpkg").write_bytes(b"")
    ref = VectorLayer("layer").convert("a.gpkg:roads", Context(base_dir=tmp_path))
    assert ref.path == tmp_path / "a.gpkg" and ref.layer == "roads"
    with pytest.raises(ParameterError, match="does not exist"):
        VectorLayer("layer").convert("missing.gpkg", Context(base_dir=tmp_path))


def test_windows_drive_letter_is_not_a_layer_name():
    from geocover.layers import parse_layer_ref

    assert parse_layer_ref("C:\\data\\x.gpkg").layer is None


def test_output_paths_cannot_escape_the_output_folder(tmp_path):
    ctx = Context(out_dir=tmp_path / "out")
    assert OutputPath("out").convert("plan.gpkg", ctx) == tmp_path / "out" / "plan.gpkg"
    with pytest.raises(ParameterError, match="leave the output folder"):
        OutputPath("out").convert("../../etc/plan.gpkg", ctx)
    absolute = tmp_path / "elsewhere" / "plan.gpkg"
    assert OutputPath("out").convert(str(absolute), ctx) == absolute
    with pytest.raises(ParameterError, match="leave the folder"):
        OutputFolder("out").convert("../x", Context(base_dir=tmp_path))


def test_exclusion_from_cli_text_and_from_table(tmp_path):
    (tmp_path / "z.gpkg").write_bytes(b"")
    ctx = Context(base_dir=tmp_path)
    p = ExclusionList("exclude")
    (a,) = p.convert("z.gpkg:flood; setback=50 m; where=zone_class in ('A', 'AE')", ctx)
    (b,) = p.convert({"layer": "z.gpkg:flood", "setback": "50 m", "where": "zone_class in ('A', 'AE')"}, ctx)
    assert a.setback_m == b.setback_m == 50.0
    assert a.where == b.where == "zone_class in ('A', 'AE')"
    assert Path(a.layer.path) == tmp_path / "z.gpkg"
    with pytest.raises(ParameterError, match="unknown key 'setbak'.*did you mean 'setback'"):
        p.convert({"layer": "z.gpkg", "setbak": "5 m"}, ctx)
