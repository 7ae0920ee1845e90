"""CRS problems: a missing CRS says how to assign one, mixed CRSs are reprojected and said so,
a geographic working CRS is refused for planar coverage with the alternatives named."""

from __future__ import annotations

import logging

import numpy as np
import pytest

from _studykit import STUDY, X0, Y0, assert_clean_exit, edit, invoke, write_study
from conftest import write_grid

import geocover as gc
from geocover.errors import CRSError


def _run(tiny, text=STUDY, *extra):
    study = write_study(tiny["dir"], text)
    return invoke(*extra, "study", str(study), "--out", str(tiny["dir"] / "out"))


def test_raster_without_crs_says_how_to_assign_one(tiny):
    write_grid(tiny["grid"], np.ones((20, 20), "float32"), X0, Y0, 100.0, crs=None)
    assert_clean_exit(_run(tiny), 1, "pop.tif has no CRS", "gdal_edit.py -a_srs")


def test_vector_layer_without_crs_says_how_to_assign_one(tiny):
    import geopandas as gpd

    frame = gpd.read_file(tiny["gpkg"], layer="candidates")
    frame = gpd.GeoDataFrame(frame.drop(columns="geometry"), geometry=list(frame.geometry))  # no CRS at all
    with pytest.warns(UserWarning):  # GDAL warns that the file will have no projection
        frame.to_file(tiny["dir"] / "nocrs.gpkg", layer="c")
    result = _run(tiny, edit(STUDY, ("tiny.gpkg:candidates", "nocrs.gpkg:c")))
    assert_clean_exit(result, 1, "candidates", "nocrs.gpkg:c has no CRS", "ogr2ogr -a_srs")


def test_geodataframe_without_crs_in_the_python_api(tiny):
    import geopandas as gpd
    from shapely.geometry import Point

    frame = gpd.GeoDataFrame({"pop": [1.0]}, geometry=[Point(X0, Y0).buffer(10)])
    with pytest.raises(CRSError, match=r"set_crs"):
        gc.demand_from_areas(frame, population="pop")
    with pytest.raises(CRSError, match=r"set_crs"):
        gc.screen_sites(frame)


def test_layers_in_different_crss_are_reprojected_and_said_so(tiny, caplog):
    import geopandas as gpd

    frame = gpd.read_file(tiny["gpkg"], layer="candidates").to_crs("EPSG:4326")
    frame.to_file(tiny["dir"] / "lonlat.gpkg", layer="c")
    sites, record = gc.screen_sites(tiny["dir"] / "lonlat.gpkg", crs="EPSG:32626")
    assert any("reprojected from EPSG:4326 to EPSG:32626" in note for note in record.notes)
    # the points come back where they were drawn (to well under a millimetre)
    assert np.allclose(sites.xy, [[X0 + 300, Y0 + 300], [X0 + 1700, Y0 + 300], [X0 + 1000, Y0 + 1000], [X0 + 1700, Y0 + 1700]], atol=1e-3)
    # the whole study runs and chooses the same plan as with the layer in the grid's CRS
    with caplog.at_level(logging.INFO, logger="geocover"):
        same = _run(tiny)
        mixed = _run(tiny, edit(STUDY, ("tiny.gpkg:candidates", "lonlat.gpkg:c")))
    assert_clean_exit(same, 0)
    assert_clean_exit(mixed, 0)
    chosen = [line for line in mixed.output.splitlines() if "sites chosen" in line]
    assert chosen == [line for line in same.output.splitlines() if "sites chosen" in line]
    assert any("reproject" in r.getMessage() and "EPSG:4326" in r.getMessage() for r in caplog.records)


def test_the_report_says_a_layer_was_reprojected(tiny):
    import geopandas as gpd

    gpd.read_file(tiny["gpkg"], layer="candidates").to_crs("EPSG:4326").to_file(tiny["dir"] / "lonlat.gpkg", layer="c")
    assert_clean_exit(_run(tiny, edit(STUDY, ("tiny.gpkg:candidates", "lonlat.gpkg:c"))), 0)
    report = (tiny["dir"] / "out" / "report.html").read_text(encoding="utf-8")
    assert "reprojected from EPSG:4326" in report


def test_geographic_working_crs_is_refused_with_alternatives(tiny):
    result = _run(tiny, edit(STUDY, ('title = "tiny"', 'title = "tiny"\ncrs = "EPSG:4326"')))
    assert_clean_exit(result, 1, "EPSG:4326 is geographic", "projected CRS in metres", "UTM", "geodesic")


def test_working_crs_in_feet_is_refused(tiny):
    result = _run(tiny, edit(STUDY, ('title = "tiny"', 'title = "tiny"\ncrs = "EPSG:2263"')))
    assert_clean_exit(result, 1, "EPSG:2263", "foot", "metres")


def test_unreadable_crs_names_the_key_and_a_form_that_works(tiny):
    result = _run(tiny, edit(STUDY, ('title = "tiny"', 'title = "tiny"\ncrs = "EPSG:99999999"')))
    assert_clean_exit(result, 1, "working CRS (crs)", "EPSG:99999999", "EPSG:32633")


def test_planar_coverage_on_geographic_points_is_refused_in_the_python_api():
    demand = gc.Demand(np.array([[-27.0, 45.0]]), np.array([1.0]), crs="EPSG:4326")
    sites = gc.Sites(np.array([[-27.0, 45.0]]), crs="EPSG:4326")
    with pytest.raises(CRSError, match="geographic.*geodesic coverage"):
        gc.reach_planar(demand, sites, limit_m=100)
    # geodesic coverage is the way for geographic data: the same pair, 0 m apart, is covered
    assert gc.reach_geodesic(demand, sites, limit_m=100).matrix.nnz == 1


def test_demand_and_sites_in_different_crss_are_refused_in_the_python_api():
    demand = gc.Demand(np.array([[X0, Y0]]), np.array([1.0]), crs="EPSG:32626")
    sites = gc.Sites(np.array([[X0, Y0]]), crs="EPSG:32627")
    with pytest.raises(CRSError, match="EPSG:32627.*EPSG:32626.*reproject"):
        gc.reach_planar(demand, sites, limit_m=100)


def test_geographic_inputs_get_a_local_projected_working_crs(tiny):
    # every input in lon/lat: the study works in the local UTM zone and says which
    write_grid(tiny["grid"], np.ones((20, 20), "float32"), -27.01, 45.14, 0.001, crs="EPSG:4326")
    demand = gc.demand_from_grid(tiny["grid"])
    assert demand.crs is not None and "32626" in str(demand.crs)
    assert any("reprojected from EPSG:4326" in note for note in demand.summary["notes"])


def test_distance_without_unit_with_geographic_inputs_is_refused(tiny):
    write_grid(tiny["grid"], np.ones((20, 20), "float32"), -27.01, 45.14, 0.001, crs="EPSG:4326")
    result = _run(tiny, edit(STUDY, ('distance = "800 m"', "distance = 0.01")))
    assert_clean_exit(result, 2, "'distance'", "unit")


def test_distance_with_a_unit_is_fine_with_geographic_inputs(tiny):
    # the control for the test above: the same study with the unit written passes the check
    write_grid(tiny["grid"], np.ones((20, 20), "float32"), -27.01, 45.14, 0.001, crs="EPSG:4326")
    result = _run(tiny, edit(STUDY, ('distance = "800 m"', 'distance = "1.1 km"')))
    assert result.exit_code != 2, result.output
