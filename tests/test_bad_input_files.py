"""Bad input files: each failure names the file (and layer) and says what to do; nothing crashes.

Through the study front end (CLI, exit codes: 2 = usage problem found by the
check before any work, 1 = a problem found while reading) and the Python API.
"""

from __future__ import annotations

import zipfile

import numpy as np
import pytest

from _studykit import STUDY, assert_clean_exit, edit, invoke, write_study

import geocover as gc
from geocover.errors import LayerError


def _run(tiny, text=STUDY):
    study = write_study(tiny["dir"], text)
    return invoke("study", str(study), "--out", str(tiny["dir"] / "out"))


def test_missing_raster_is_named_before_any_work(tiny):
    result = _run(tiny, edit(STUDY, ('"pop.tif"', '"nothere.tif"')))
    assert_clean_exit(result, 2, "[demand]", "'grid'", "nothere.tif does not exist", "check the path")
    assert not (tiny["dir"] / "out").exists()


def test_missing_layer_file_is_named_before_any_work(tiny):
    result = _run(tiny, edit(STUDY, ("tiny.gpkg:candidates", "gone.gpkg:candidates")))
    assert_clean_exit(result, 2, "[sites]", "'candidates'", "gone.gpkg does not exist")


def test_missing_path_in_the_python_api_is_a_layer_error(tiny):
    with pytest.raises(LayerError, match="nothere.tif does not exist"):
        gc.demand_from_grid(tiny["dir"] / "nothere.tif")
    with pytest.raises(LayerError, match="gone.gpkg does not exist"):
        gc.screen_sites(str(tiny["dir"] / "gone.gpkg"))


def test_truncated_geotiff_names_the_file(tiny):
    data = tiny["grid"].read_bytes()
    tiny["grid"].write_bytes(data[: len(data) // 3])  # the header survives, the pixels do not
    result = _run(tiny)
    out = assert_clean_exit(result, 1, "pop.tif", "complete")
    assert "unexpected error" not in out


def test_truncated_geotiff_in_the_python_api_is_a_layer_error(tiny):
    data = tiny["grid"].read_bytes()
    tiny["grid"].write_bytes(data[: len(data) // 3])
    with pytest.raises(LayerError, match="pop.tif"):
        gc.demand_from_grid(tiny["grid"])


def test_file_that_is_not_a_raster_names_the_file(tiny):
    tiny["grid"].write_bytes(b"this is not a GeoTIFF\n" * 20)
    assert_clean_exit(_run(tiny), 1, "pop.tif", "cannot open", "as a raster")


def test_truncated_geopackage_names_the_file(tiny):
    data = tiny["gpkg"].read_bytes()
    tiny["gpkg"].write_bytes(data[: len(data) // 3])
    assert_clean_exit(_run(tiny), 1, "tiny.gpkg", "cannot be read", "complete geopackage")


def test_zip_given_where_a_raster_was_expected(tiny):
    with zipfile.ZipFile(tiny["dir"] / "pop.zip", "w") as archive:
        archive.write(tiny["grid"], "pop.tif")
    result = _run(tiny, edit(STUDY, ('"pop.tif"', '"pop.zip"')))
    assert_clean_exit(result, 1, "pop.zip is a zip archive", "unpack it")


def test_zip_given_where_a_layer_was_expected(tiny):
    with zipfile.ZipFile(tiny["dir"] / "layers.zip", "w") as archive:
        archive.write(tiny["gpkg"], "tiny.gpkg")
    result = _run(tiny, edit(STUDY, ("tiny.gpkg:candidates", "layers.zip:candidates")))
    assert_clean_exit(result, 1, "layers.zip is a zip archive", "unpack it")


def test_folder_given_where_a_raster_was_expected(tiny):
    (tiny["dir"] / "rasters").mkdir()
    result = _run(tiny, edit(STUDY, ('"pop.tif"', '"rasters"')))
    assert_clean_exit(result, 2, "'grid'", "is a folder", "name the raster file inside")


def test_folder_given_where_a_layer_was_expected(tiny):
    (tiny["dir"] / "layers").mkdir()
    result = _run(tiny, edit(STUDY, ("tiny.gpkg:candidates", "layers")))
    assert_clean_exit(result, 1, "candidates", "is a folder, not a layer")


def test_layer_name_that_does_not_exist_lists_those_that_do(tiny):
    result = _run(tiny, edit(STUDY, ("tiny.gpkg:candidates", "tiny.gpkg:candidatez")))
    out = assert_clean_exit(result, 1, "no layer 'candidatez'", "its layers are")
    for layer in ("candidates", "stations", "flood", "area"):
        assert layer in out


def test_multi_layer_file_without_a_layer_name_lists_the_layers(tiny):
    result = _run(tiny, edit(STUDY, ("tiny.gpkg:candidates", "tiny.gpkg")))
    assert_clean_exit(result, 1, "holds 4 layers", "name one", "tiny.gpkg:candidates")


def test_empty_candidate_layer_is_named(tiny):
    import geopandas as gpd

    gpd.GeoDataFrame({"parcel_id": [], "cost": []}, geometry=[], crs="EPSG:32626").to_file(
        tiny["gpkg"], layer="nothing"
    )
    text = edit(STUDY, ("tiny.gpkg:candidates", "tiny.gpkg:nothing"), ('existing = "tiny.gpkg:stations"\n', ""))
    assert_clean_exit(_run(tiny, text), 1, "candidates", "tiny.gpkg:nothing has no features")


def test_empty_candidate_layer_beside_existing_sites_says_there_are_no_candidates(tiny):
    # with existing facilities an empty candidate layer is allowed (an audit of today's sites needs
    # none), so the model is what refuses: it must say how many candidates there are
    import geopandas as gpd

    gpd.GeoDataFrame({"parcel_id": [], "cost": []}, geometry=[], crs="EPSG:32626").to_file(
        tiny["gpkg"], layer="nothing"
    )
    result = _run(tiny, edit(STUDY, ("tiny.gpkg:candidates", "tiny.gpkg:nothing")))
    assert_clean_exit(result, 1, "sites: 2 new sites asked for", "only 0 candidate sites", "use at most 0")


def test_empty_population_areas_are_named(tiny):
    import geopandas as gpd

    gpd.GeoDataFrame({"pop": []}, geometry=[], crs="EPSG:32626").to_file(tiny["dir"] / "areas.gpkg", layer="a")
    text = edit(STUDY, ('grid = "pop.tif"', 'areas = "areas.gpkg:a"\npopulation = "pop"'))
    assert_clean_exit(_run(tiny, text), 1, "population areas", "areas.gpkg:a has no features")


def test_truncated_land_use_raster_names_the_file(tiny):
    from conftest import write_grid

    path = write_grid(tiny["dir"] / "lu.tif", np.ones((20, 20), "int16"), 500000.0, 5000000.0, 100.0, nodata=None)
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    text = edit(STUDY, ('study_area = "tiny.gpkg:area"', 'study_area = "tiny.gpkg:area"\nland_use = "lu.tif"\nforbidden_classes = [7]'))
    out = assert_clean_exit(_run(tiny, text), 1, "lu.tif")
    assert "unexpected error" not in out
