"""The attribute-filter language: parsing, evaluation and errors.

Independent check: on data without missing values the masks agree with
pandas' own ``DataFrame.query`` (pandas from PyPI, used here only as an
oracle; geocover never evaluates text).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from geocover.errors import ParameterError
from geocover.filters import filter_mask, parse_filter


@pytest.fixture()
def frame():
    rng = np.random.default_rng(0)
    n = 200
    return pd.DataFrame({
        "zone_class": rng.choice(["A", "AE", "X", "VE", "D"], size=n),
        "depth_m": np.round(rng.uniform(0, 3, size=n), 2),
        "year": rng.integers(1990, 2025, size=n),
        "levee": rng.random(n) < 0.3,
    })


@pytest.mark.parametrize(
    "ours, pandas_query",
    [
        ("zone_class in ('A', 'AE')", "zone_class in ['A', 'AE']"),
        ('zone_class not in ("A", "AE")', "zone_class not in ['A', 'AE']"),
        ("depth_m >= 0.5", "depth_m >= 0.5"),
        ("depth_m < 1 and year > 2000", "depth_m < 1 and year > 2000"),
        ("depth_m <= 0.3 or zone_class == 'X'", "depth_m <= 0.3 or zone_class == 'X'"),
        ("not (zone_class = 'D' or year != 2010)", "not (zone_class == 'D' or year != 2010)"),
        ("zone_class <> 'VE' and not depth_m > 2.5", "zone_class != 'VE' and not depth_m > 2.5"),
        ("levee == true and depth_m > 1e-1", "levee == True and depth_m > 0.1"),
        ("year in (1995, 2005, 2015,)", "year in [1995, 2005, 2015]"),
        ("depth_m > 1 or depth_m < 0.5 and zone_class == 'A'", "depth_m > 1 or (depth_m < 0.5 and zone_class == 'A')"),
        ("NOT depth_m > 1 AND Zone_class_dummy_is_a_name_only != 'x'", None),
    ],
)
def test_masks_agree_with_pandas_query(frame, ours, pandas_query):
    if pandas_query is None:
        with pytest.raises(ParameterError, match="no field 'Zone_class_dummy_is_a_name_only'"):
            filter_mask(frame, ours, layer="flood_zones")
        return
    expected = frame.eval(pandas_query).to_numpy()
    got = filter_mask(frame, ours, layer="flood_zones")
    assert got.dtype == bool
    np.testing.assert_array_equal(got, expected)
    assert 0 < got.sum() < len(frame)  # the cases are chosen to select some rows, not all


def test_missing_values_match_no_comparison():
    frame = pd.DataFrame({"depth_m": [0.2, np.nan, 2.0], "zone_class": ["A", None, "X"]})
    assert filter_mask(frame, "depth_m < 1").tolist() == [True, False, False]
    assert filter_mask(frame, "depth_m != 0.2").tolist() == [False, False, True]
    assert filter_mask(frame, "zone_class not in ('A')").tolist() == [False, False, True]
    assert filter_mask(frame, "depth_m is null").tolist() == [False, True, False]
    assert filter_mask(frame, "zone_class is not null").tolist() == [True, False, True]
    assert filter_mask(frame, "not depth_m > 1").tolist() == [True, True, False]


def test_quoted_field_names_and_escapes():
    frame = pd.DataFrame({"zone class": ["it's", "A"], "n": [1, 2]})
    assert filter_mask(frame, "`zone class` == 'it\\'s'").tolist() == [True, False]
    assert filter_mask(frame, '`zone class` == "it\'s" or n >= 2').tolist() == [True, True]
    assert parse_filter("`zone class` == 'A' and n > 1 or n < 0").fields == ("zone class", "n")


@pytest.mark.parametrize(
    "text, message, position",
    [
        ("depth_m >", "expected a value", 9),
        ("depth_m >= 0.5 and", "expected a field name", 18),
        ("zone_class in ('A', 'AE'", "expected ',' or ')'", 24),
        ("zone_class in 'A'", "expected '(' after 'in'", 14),
        ("(depth_m > 1", "expected ')'", 12),
        ("depth_m > 1)", "expected 'and', 'or' or the end", 11),
        ("depth_m ~ 1", "unexpected character '~'", 8),
        ("zone_class == A", "put text values in quotes", 14),
        ("depth_m", "expected a comparison", 7),
        ("", "the filter is empty", 0),
        ("__import__('os') == 1", "expected a comparison", 10),
    ],
)
def test_syntax_errors_point_at_the_position(text, message, position):
    with pytest.raises(ParameterError) as err:
        parse_filter(text, param="where")
    assert message in str(err.value)
    assert f"at position {position}" in str(err.value)
    assert err.value.param == "where"


def test_unknown_field_lists_the_layer_fields(frame):
    with pytest.raises(ParameterError) as err:
        filter_mask(frame, "zone == 'A'", layer="flood_zones")
    assert "layer flood_zones has no field 'zone'; its fields are: zone_class, depth_m, year, levee" in str(err.value)
    with pytest.raises(ParameterError, match="at position 21"):
        filter_mask(frame, "zone_class == 'A' or zone > 1", layer="flood_zones")


def test_mixed_type_fields_are_refused_clearly():
    frame = pd.DataFrame({"code": ["A", 3, None]})
    with pytest.raises(ParameterError, match="cannot be compared"):
        filter_mask(frame, "code > 'B'", layer="odd")


def test_type_mismatches_are_explained(frame):
    with pytest.raises(ParameterError, match="holds numbers .* write the value as a number"):
        filter_mask(frame, "depth_m > '1'", layer="flood_zones")
    with pytest.raises(ParameterError, match="holds text .* put the value in quotes"):
        filter_mask(frame, "zone_class == 1", layer="flood_zones")
    with pytest.raises(ParameterError, match="true/false"):
        filter_mask(frame, "levee == 'yes'", layer="flood_zones")


def test_no_python_is_ever_evaluated(frame):
    # text that would do something in Python is only ever a string value or a syntax error
    assert not filter_mask(frame, "zone_class == '__import__(\"os\").system(\"false\")'").any()
    with pytest.raises(ParameterError):
        parse_filter("zone_class == 'A'; import os")
    with pytest.raises(ParameterError):
        parse_filter("depth_m > 1 + 1")


def test_a_field_in_the_wrong_case_is_pointed_out(frame):
    with pytest.raises(ParameterError) as err:
        filter_mask(frame, "Zone_Class == 'A'", layer="flood_zones")
    assert "no field 'Zone_Class' (field names are case-sensitive: did you mean 'zone_class'?)" in str(err.value)


def test_sql_doubled_quotes_get_a_hint_and_backslash_escapes_work():
    with pytest.raises(ParameterError, match=r"two quoted texts in a row.*at position 18"):
        parse_filter("zone_class == 'it''s'")
    frame = pd.DataFrame({"path": ["C:\\new", "C:new"]})
    # a backslash escapes the next character, so a literal backslash is written twice
    assert filter_mask(frame, "path == 'C:\\\\new'").tolist() == [True, False]
    assert filter_mask(frame, "path == 'C:\\new'").tolist() == [False, True]


def test_deep_nesting_is_a_parameter_error_not_a_recursion_error():
    assert filter_mask(pd.DataFrame({"a": [1, 2]}), "(" * 50 + "not " * 41 + "a == 1" + ")" * 50).tolist() == [False, True]
    with pytest.raises(ParameterError, match="nests 'not' and '\\(' more than 100 deep"):
        parse_filter("(" * 400 + "a == 1" + ")" * 400)
    with pytest.raises(ParameterError, match="more than 100 deep"):
        parse_filter("not " * 1200 + "a == 1")
