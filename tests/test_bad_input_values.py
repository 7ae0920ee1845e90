"""Bad values: population fields, raster cells and bands, limits, p, budgets and targets.

Each message names the layer or file, the field or parameter, the first
offenders and the fix.  Usage problems found by the check exit 2; problems
found while reading or solving exit 1.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from _studykit import STUDY, X0, Y0, assert_clean_exit, edit, invoke, write_study
from conftest import write_grid

import geocover as gc
from geocover.errors import InputError, LayerError, ParameterError

AREAS = ('grid = "pop.tif"', 'areas = "areas.gpkg:a"\npopulation = "pop"')


def _run(tiny, text=STUDY):
    study = write_study(tiny["dir"], text)
    return invoke("study", str(study), "--out", str(tiny["dir"] / "out"))


def _areas(tiny, pop, **extra):
    import geopandas as gpd
    from shapely.geometry import box

    geoms = [box(X0 + i * 100, Y0, X0 + (i + 1) * 100, Y0 + 100) for i in range(len(pop))]
    gpd.GeoDataFrame({"pop": pop, **extra}, geometry=geoms, crs="EPSG:32626").to_file(tiny["dir"] / "areas.gpkg", layer="a")
    return edit(STUDY, AREAS)


# ----------------------------------------------------------------------------- population fields


def test_missing_population_field_lists_the_numeric_fields(tiny):
    text = edit(_areas(tiny, [1.0, 2.0], name=["a", "b"], households=[1, 1]), ('population = "pop"', 'population = "people"'))
    out = assert_clean_exit(_run(tiny, text), 1, "population areas", "areas.gpkg:a", "no field 'people'", "numeric fields are: pop")
    assert "households" in out


def test_non_numeric_population_field_names_the_field_and_the_fix(tiny):
    out = assert_clean_exit(_run(tiny, _areas(tiny, ["12", "many"])), 1, "field 'pop'", "not numeric", "CAST(pop AS REAL)")
    assert "{field}" not in out


def test_negative_population_names_the_first_offenders(tiny):
    pop = [5.0, -1.0, 3.0, -7.0, 2.0]
    out = assert_clean_exit(_run(tiny, _areas(tiny, pop)), 1, "field 'pop'", "negative", "2 feature(s)", "zero or more")
    assert "ids 2, 4" in out  # GeoPackage fids of the two offenders, in order
    assert "-1.0" in out


def test_missing_population_names_the_features(tiny):
    out = assert_clean_exit(_run(tiny, _areas(tiny, [5.0, np.nan, np.nan])), 1, "field 'pop'", "no value", "2 feature(s)")
    assert "ids 2, 3" in out and "fill them in" in out


def test_many_offenders_are_counted_and_the_list_is_cut(tiny):
    pop = [-1.0] * 25
    out = assert_clean_exit(_run(tiny, _areas(tiny, pop)), 1, "25 feature(s)", "and 15 more")
    assert len(out) < 1000


def test_offender_ids_are_the_fids_a_gis_shows(tiny):
    out = assert_clean_exit(_run(tiny, _areas(tiny, [5.0, -1.0])), 1, "negative")
    assert "ids 2" in out  # the second feature of a GeoPackage has fid 2


def test_bad_population_points_in_the_python_api(tiny):
    import geopandas as gpd
    from shapely.geometry import Point

    frame = gpd.GeoDataFrame({"w": [1.0, np.inf]}, geometry=[Point(X0, Y0), Point(X0 + 1, Y0)], crs="EPSG:32626")
    with pytest.raises(LayerError, match=r"field 'w'.*infinite.*ids 1"):
        gc.demand_from_points(frame, "w")
    with pytest.raises(InputError, match=r"demand weight.*row 1"):
        gc.Demand(np.zeros((2, 2)), [1.0, -3.0])


# ----------------------------------------------------------------------------- rasters


def test_negative_and_nan_cells_are_located_and_the_fix_named(tiny):
    pop = np.ones((20, 20), "float32")
    pop[5, 7] = -3.0
    pop[9, 2] = np.nan
    write_grid(tiny["grid"], pop, X0, Y0, 100.0)
    out = assert_clean_exit(_run(tiny), 1, "pop.tif", "band 1", "2 cell(s)", "row 5, column 7", "bad_values='zero'")
    assert "x=500750" in out  # the first offender's cell centre: x0 + 7.5 cells
    # and the fix it names works: bad cells count as zero people
    demand = gc.demand_from_grid(tiny["grid"], bad_values="zero")
    assert demand.total == pytest.approx(398.0)


def test_band_out_of_range_names_the_bands_there_are(tiny):
    result = _run(tiny, edit(STUDY, ('grid = "pop.tif"', 'grid = "pop.tif"\nband = 3')))
    assert_clean_exit(result, 1, "band", "pop.tif has 1 band(s)", "from 1 to 1")
    result = _run(tiny, edit(STUDY, ('grid = "pop.tif"', 'grid = "pop.tif"\nband = 0')))
    assert_clean_exit(result, 2, "'band'", "at least 1")


# ----------------------------------------------------------------------------- limits


@pytest.mark.parametrize("value", ['"0 m"', '"-5 km"', "0", "-1"])
def test_zero_or_negative_distance_is_a_usage_error(tiny, value):
    result = _run(tiny, edit(STUDY, ('distance = "800 m"', f"distance = {value}")))
    assert_clean_exit(result, 2, "[service]", "'distance'", "more than 0 m")


@pytest.mark.parametrize("value", ["nan", "inf", "-inf"])
def test_non_finite_distance_is_a_usage_error(tiny, value):
    result = _run(tiny, edit(STUDY, ('distance = "800 m"', f"distance = {value}")))
    assert_clean_exit(result, 2, "[service] distance", "finite distance")


@pytest.mark.parametrize("value", ["inf", "nan"])
def test_non_finite_counts_are_usage_errors_not_overflows(tiny, value):
    result = _run(tiny, edit(STUDY, ("sites = 2", f"sites = {value}")))
    assert_clean_exit(result, 2, "[model]", "'sites'", "finite number")


def test_zero_travel_time_is_a_usage_error(tiny):
    text = edit(STUDY, ('distance = "800 m"', 'metric = "network"\ntime = "0 min"\nroads = "tiny.gpkg:area"\nspeed_field = "v"'))
    assert_clean_exit(_run(tiny, text), 2, "'time'", "more than 0 s")


def test_limits_in_the_python_api_name_the_parameter():
    demand = gc.Demand(np.zeros((1, 2)), [1.0], crs="EPSG:32626")
    sites = gc.Sites(np.zeros((1, 2)), crs="EPSG:32626")
    for bad in (0.0, -10.0, np.nan, np.inf):
        with pytest.raises(ParameterError) as info:
            gc.reach_planar(demand, sites, limit_m=bad)
        assert info.value.param == "limit"


# ----------------------------------------------------------------------------- p, budget, target


def test_more_sites_than_candidates(tiny):
    result = _run(tiny, edit(STUDY, ("sites = 2", "sites = 50")))
    # four candidates, one of them in flood zone A: three are left
    assert_clean_exit(result, 1, "sites", "50 new sites asked for", "only 3 candidate sites", "at most 3")


def test_more_sites_than_candidates_in_the_python_api():
    reach = gc.Reach.from_sparse(sp.csr_matrix(np.eye(3)))
    with pytest.raises(ParameterError, match="only 3 candidate sites") as info:
        gc.cover_most(reach, sites=4)
    assert info.value.param == "sites"


def test_budget_below_the_cost_of_the_kept_sites(tiny):
    import geopandas as gpd

    stations = gpd.read_file(tiny["gpkg"], layer="stations")
    stations["cost"] = 5.0
    stations.to_file(tiny["gpkg"], layer="stations")
    result = _run(tiny, edit(STUDY, ("sites = 2", "budget = 2")))
    assert_clean_exit(result, 1, "budget", "below the cost of the kept sites (5)", "at least 5")


def test_budget_below_the_kept_cost_in_the_python_api():
    reach = gc.Reach.from_sparse(sp.csr_matrix(np.eye(3)), cost=[4.0, 1.0, 1.0], role=[gc.SiteRole.KEPT, 0, 0])
    with pytest.raises(ParameterError, match="below the cost of the kept sites") as info:
        gc.cover_most(reach, budget=3.0)
    assert info.value.param == "budget"
    assert len(gc.cover_most(reach, budget=4.0).sites) == 1  # exactly the kept cost: only the kept site


@pytest.mark.parametrize("share", ['"150 %"', "150", '"100.5 %"', '"-5 %"'])
def test_coverage_target_outside_0_to_100_percent(tiny, share):
    text = edit(STUDY, ('kind = "cover-most"\nsites = 2', f'kind = "cover-target"\nshare = {share}'))
    assert_clean_exit(_run(tiny, text), 2, "[model]", "share", "between 0 % and 100 %")


def test_coverage_target_of_zero_names_the_parameter(tiny):
    text = edit(STUDY, ('kind = "cover-most"\nsites = 2', 'kind = "cover-target"\nshare = 0'))
    assert_clean_exit(_run(tiny, text), 1, "share", "(0, 1]")


def test_solver_gap_of_one_is_refused(tiny):
    assert_clean_exit(_run(tiny, edit(STUDY, ("sites = 2", "sites = 2\ngap = 1"))), 1, "gap", "[0, 1)")


def test_a_grid_with_no_people_says_so(tiny):
    # every cell zero: a clear result with a warning, not a silent "0 of 0"
    write_grid(tiny["grid"], np.zeros((20, 20), "float32"), X0, Y0, 100.0)
    out = assert_clean_exit(_run(tiny), 0)
    assert "holds no people" in out


def test_screening_record_allows_missing_coordinates_only_for_invalid_rows():
    from geocover.values import ScreeningRecord

    def record(verdict):
        return ScreeningRecord(
            xy=[[0.0, 0.0], [np.nan, np.nan]], verdict=verdict, rule=["", ""], layer=["", ""], feature=[-1, -1],
            nearest_exclusion_m=[np.inf, np.inf], site_index=[0, -1],
        )

    assert len(record(["kept", "invalid"])) == 2
    with pytest.raises(InputError, match="only rows with verdict 'invalid'"):
        record(["kept", "excluded"])
