"""demand_from_grid: population rasters -> weighted demand points."""

from __future__ import annotations

import logging
import math
import os
from pathlib import Path

import numpy as np
import pytest
from affine import Affine

from geocover.demand import demand_from_grid
from geocover.errors import CRSError, GeocoverError, InputError, LayerError, ParameterError
from geocover.grid import apply_affine, ellipsoid_band_area

from test_demand_fixtures import write_raster

UTM = Affine(100.0, 0.0, 500000.0, 0.0, -100.0, 4000000.0)


def conserved(demand, rel=1e-12):
    s = demand.summary
    dropped = sum(v["people"] for v in s["dropped"].values())
    assert s["people_out"] == pytest.approx(demand.total, rel=1e-12, abs=1e-9)
    assert s["people_out"] + dropped == pytest.approx(s["people_in"], rel=rel, abs=1e-9)


def test_count_grid_points_at_cell_centres(tmp_path):
    data = np.array([[0, 1, 2], [3, -9, 5]], dtype=np.float32)
    path = write_raster(tmp_path / "pop.tif", data, nodata=-9)
    d = demand_from_grid(path)
    assert d.crs == "EPSG:32626"
    assert d.weight.tolist() == [1.0, 2.0, 3.0, 5.0]
    assert d.unit.tolist() == [1, 2, 3, 5]  # row * width + col
    # centre of cell (row 0, col 1): x = 500000 + 1.5 * 100, y = 4000000 - 0.5 * 100
    assert d.xy[0].tolist() == [500150.0, 3999950.0]
    assert d.xy[3].tolist() == [500250.0, 3999850.0]
    np.testing.assert_allclose(d.footprint, 50.0 * math.sqrt(2.0))
    s = d.summary
    assert s["people_in"] == 11.0 and s["points"] == 4
    assert s["dropped"]["nodata"] == {"cells": 1, "people": 0.0}
    conserved(d)


@pytest.mark.parametrize(
    "dtype, nodata", [("float64", float("nan")), ("float32", -1.0), ("uint16", 65535), ("int32", -99), ("uint8", None)]
)
def test_data_types_and_nodata(tmp_path, dtype, nodata):
    rng = np.random.default_rng(3)
    data = rng.integers(0, 50, size=(7, 9)).astype(dtype)
    if nodata is not None:
        data[2, 3] = nodata
        data[6, 8] = nodata
    path = write_raster(tmp_path / "pop.tif", data, nodata=nodata)
    d = demand_from_grid(path)
    good = data.astype(np.float64)
    if nodata is not None:
        good[2, 3] = good[6, 8] = 0.0
    assert d.total == pytest.approx(good.sum())
    assert len(d) == int((good > 0).sum())
    assert d.summary["dropped"].get("nodata", {"cells": 0})["cells"] == (2 if nodata is not None else 0)
    conserved(d)


def test_scale_and_offset_applied(tmp_path):
    data = np.array([[10, 20], [0, 40]], dtype=np.uint16)
    path = write_raster(tmp_path / "pop.tif", data, nodata=0, scale=0.5, offset=1.0)
    d = demand_from_grid(path)
    assert sorted(d.weight.tolist()) == [6.0, 11.0, 21.0]
    assert any("scale" in n for n in d.summary["notes"])


@pytest.mark.parametrize("dtype", ["float64", "int16"])
def test_scale_and_offset_over_several_windows(tmp_path, dtype):
    # float64 windows are scaled in the reused read buffer; nodata is judged on the raw values
    rng = np.random.default_rng(8)
    data = rng.integers(0, 30, size=(9, 4)).astype(dtype)
    data[3, 1] = data[7, 2] = -1
    path = write_raster(tmp_path / "pop.tif", data, nodata=-1, scale=2.5, offset=0.5)
    d = demand_from_grid(path, window_rows=2)
    good = data != -1
    expected = data.astype(np.float64) * 2.5 + 0.5
    assert d.total == pytest.approx(float(expected[good].sum()), rel=1e-12)
    assert sorted(d.unit.tolist()) == np.flatnonzero(good.ravel()).tolist()
    assert d.summary["dropped"]["nodata"]["cells"] == 2
    conserved(d)


def test_band_choice_and_bad_band(tmp_path):
    data = np.stack([np.ones((3, 3)), np.full((3, 3), 2.0)]).astype(np.float32)
    path = write_raster(tmp_path / "pop.tif", data)
    assert demand_from_grid(path, band=2).total == 18.0
    assert demand_from_grid(path).total == 9.0
    with pytest.raises(ParameterError, match="2 band") as err:
        demand_from_grid(path, band=3)
    assert err.value.param == "band"


def test_bad_values_error_names_band_count_and_first_cell(tmp_path):
    data = np.ones((6, 5), dtype=np.float32)
    data[2, 4] = -3
    data[4, 1] = np.inf
    data[5, 0] = np.nan
    path = write_raster(tmp_path / "pop.tif", data, nodata=-9999)
    with pytest.raises(InputError, match=r"band 1: 3 cell\(s\).*row 2, column 4") as err:
        demand_from_grid(path, window_rows=1)
    assert "bad_values='zero'" in str(err.value)
    d = demand_from_grid(path, bad_values="zero")
    assert d.total == 27.0
    assert d.summary["dropped"]["bad_values"]["cells"] == 3
    assert any("as zero" in n for n in d.summary["notes"])
    conserved(d)


def test_wrong_choices_list_the_valid_ones(tmp_path):
    path = write_raster(tmp_path / "pop.tif", np.ones((2, 2), dtype=np.float32))
    for param, value in (("values", "people"), ("clip_mode", "middle"), ("bad_values", "skip")):
        with pytest.raises(ParameterError) as err:
            demand_from_grid(path, **{param: value})
        assert err.value.param == param
        assert "'" in str(err.value) and value in str(err.value)
    with pytest.raises(ParameterError, match="'count', 'density_km2'"):
        demand_from_grid(path, values="people")
    with pytest.raises(ParameterError) as err:
        demand_from_grid(path, coarsen=0)
    assert err.value.param == "coarsen"
    # enum members and plain strings both work
    from geocover.demand import GridValues

    assert demand_from_grid(path, values=GridValues.COUNT).total == demand_from_grid(path, values="COUNT").total


def test_missing_file_is_a_layer_error(tmp_path):
    with pytest.raises(LayerError, match="does not exist"):
        demand_from_grid(tmp_path / "nope.tif")
    assert issubclass(LayerError, GeocoverError)


def _brute_coarsen(data, transform, k):
    """Reference: loop over blocks, weighted centroid of cell centres (plain Python)."""
    out = {}
    h, w = data.shape
    for r in range(h):
        for c in range(w):
            v = float(data[r, c])
            if v <= 0:
                continue
            key = (r // k * k) * w + (c // k * k)
            x, y = apply_affine(transform, c + 0.5, r + 0.5)
            s, sx, sy = out.get(key, (0.0, 0.0, 0.0))
            out[key] = (s + v, sx + v * x, sy + v * y)
    return {key: (s, sx / s, sy / s) for key, (s, sx, sy) in out.items()}


@pytest.mark.parametrize("k", [2, 3, 5])
def test_coarsening_weighted_centroids_and_footprints(tmp_path, k):
    rng = np.random.default_rng(k)
    data = rng.gamma(0.5, 10.0, size=(13, 11)).astype(np.float32)
    data[rng.random(data.shape) < 0.4] = 0.0
    path = write_raster(tmp_path / "pop.tif", data)
    d = demand_from_grid(path, coarsen=k, window_rows=k)  # several windows
    ref = _brute_coarsen(data, UTM, k)
    assert sorted(d.unit.tolist()) == sorted(ref)
    for i, u in enumerate(d.unit.tolist()):
        s, x, y = ref[u]
        assert d.weight[i] == pytest.approx(s, rel=1e-6)
        assert d.xy[i, 0] == pytest.approx(x, abs=1e-6)
        assert d.xy[i, 1] == pytest.approx(y, abs=1e-6)
        # footprint bounds the distance to every corner of the k x k block, cut at the grid's edge
        r0, c0 = divmod(u, data.shape[1])
        r1, c1 = min(r0 + k, data.shape[0]), min(c0 + k, data.shape[1])
        cx, cy = apply_affine(UTM, np.array([c0, c1, c0, c1]), np.array([r0, r0, r1, r1]))
        assert d.footprint[i] == pytest.approx(np.hypot(cx - x, cy - y).max(), rel=1e-9)
        assert d.footprint[i] >= 0.5 * 100 * math.hypot(r1 - r0, c1 - c0) - 1e-9
        if (r1 - r0, c1 - c0) == (k, k):
            assert d.footprint[i] >= 0.5 * k * 100 * math.sqrt(2) - 1e-9
    assert d.total == pytest.approx(float(data.astype(np.float64).sum()), rel=1e-9)
    conserved(d)


def test_block_larger_than_the_grid_has_the_grid_as_footprint(tmp_path):
    # 3 x 5 cells of 100 m, coarsen=10: one block, cut to the 300 m x 500 m grid
    path = write_raster(tmp_path / "pop.tif", np.ones((3, 5), dtype=np.float32))
    d = demand_from_grid(path, coarsen=10)
    assert d.total == 15.0 and d.unit.tolist() == [0]
    assert d.xy[0].tolist() == [500250.0, 3999850.0]
    assert d.footprint[0] == pytest.approx(math.hypot(250.0, 150.0), rel=1e-12)  # half the grid's diagonal


def test_window_size_does_not_change_the_result(tmp_path):
    rng = np.random.default_rng(0)
    data = rng.poisson(2.0, size=(37, 23)).astype(np.float32)
    path = write_raster(tmp_path / "pop.tif", data, tiled=True, blocksize=16, compress="deflate")
    whole = demand_from_grid(path, coarsen=2)
    for rows in (1, 2, 7, 16, 100):
        part = demand_from_grid(path, coarsen=2, window_rows=rows)
        np.testing.assert_array_equal(part.unit, whole.unit)
        np.testing.assert_allclose(part.xy, whole.xy)
        np.testing.assert_allclose(part.weight, whole.weight)


def test_geographic_grid_gets_a_local_utm_crs(tmp_path, caplog):
    # 0.01 degree cells near lon -27, lat 38.7 -> UTM zone 26 north
    transform = Affine(0.01, 0.0, -27.1, 0.0, -0.01, 38.8)
    data = np.ones((10, 20), dtype=np.float32)
    path = write_raster(tmp_path / "pop.tif", data, transform=transform, crs="EPSG:4326")
    with caplog.at_level(logging.INFO, logger="geocover"):
        d = demand_from_grid(path)
    assert d.crs == "EPSG:32626"
    assert "EPSG:32626" in caplog.text
    from pyproj import Transformer

    lon, lat = apply_affine(transform, 0.5, 0.5)
    x, y = Transformer.from_crs("EPSG:4326", "EPSG:32626", always_xy=True).transform(lon, lat)
    assert d.xy[0].tolist() == pytest.approx([x, y], abs=1e-6)
    # footprint is about half the cell diagonal in metres (~ 870 m x 1110 m cells)
    assert 600 < d.footprint[0] < 760
    # exactly: the farthest of the cell's four corners, each carried to UTM by pyproj
    tr = Transformer.from_crs("EPSG:4326", "EPSG:32626", always_xy=True)
    lons, lats = apply_affine(transform, np.array([0.0, 1.0, 0.0, 1.0]), np.array([0.0, 0.0, 1.0, 1.0]))
    cx, cy = tr.transform(lons, lats)
    assert d.footprint[0] == pytest.approx(np.hypot(cx - x, cy - y).max(), rel=1e-9)
    assert d.summary["source_crs"] == "EPSG:4326"


def test_given_crs_must_be_projected(tmp_path):
    path = write_raster(tmp_path / "pop.tif", np.ones((2, 2), dtype=np.float32))
    with pytest.raises(CRSError, match="geographic"):
        demand_from_grid(path, crs="EPSG:4326")
    d = demand_from_grid(path, crs="EPSG:3857")
    assert d.crs == "EPSG:3857" and d.total == 4.0


def test_compound_crs_in_feet_is_not_taken_for_metres():
    from pyproj import CRS

    from geocover.demand import _metre_factor, _working_crs

    # EPSG:2229 is California zone 5 in US survey feet; +5703 adds NAVD88 heights in metres
    us_foot = 1200.0 / 3937.0  # definition of the US survey foot (NIST)
    assert _metre_factor(CRS("EPSG:2229+5703")) == pytest.approx(us_foot, rel=1e-12)
    assert _metre_factor(CRS("EPSG:2229")) == pytest.approx(us_foot, rel=1e-12)
    assert _metre_factor(CRS("EPSG:32626+5703")) == 1.0
    # so a local projected CRS in metres is chosen, not a CRSError about the feet
    work = _working_crs(None, CRS("EPSG:2229+5703"), (-118.0, 34.0))
    assert work.to_epsg() == 32611


def _geod_cell_area(lon0, lat0, dlon, dlat, n=2000):
    """Cell area from pyproj's Geod.polygon_area_perimeter, with the parallels densified.

    The edges of a lat/lon cell run along parallels, not geodesics; with 2000 vertices per
    edge the geodesic chords follow the parallels closely enough for 1e-6 relative.
    """
    from pyproj import Geod

    t = np.linspace(0.0, 1.0, n)
    lon = np.r_[lon0 + dlon * t, np.full(n, lon0 + dlon), lon0 + dlon * t[::-1], np.full(n, lon0)]
    lat = np.r_[np.full(n, lat0), lat0 + dlat * t, np.full(n, lat0 + dlat), lat0 + dlat * t[::-1]]
    area, _ = Geod(ellps="WGS84").polygon_area_perimeter(lon, lat)
    return abs(area)


@pytest.mark.parametrize("lat0, dlat, dlon", [(0.0, 1.0, 1.0), (45.0, 0.5, 2.0), (-70.0, 1.0, 1.0), (88.0, 2.0, 3.0)])
def test_ellipsoidal_cell_area_matches_pyproj_geod(lat0, dlat, dlon):
    # independent reference: pyproj.Geod.polygon_area_perimeter (GeographicLib algorithms)
    ref = _geod_cell_area(10.0, lat0, dlon, dlat)
    assert float(ellipsoid_band_area(lat0, lat0 + dlat, dlon)) == pytest.approx(ref, rel=1e-6)


def test_one_degree_cell_at_equator_is_about_12308_km2():
    # from memory: a 1 x 1 degree cell at the equator is about 12,308 km2; verified against pyproj here
    area = float(ellipsoid_band_area(0.0, 1.0, 1.0))
    assert area / 1e6 == pytest.approx(12308, abs=1.0)
    assert area == pytest.approx(_geod_cell_area(0.0, 0.0, 1.0, 1.0), rel=1e-6)


def test_density_grid_geographic_uses_true_cell_areas(tmp_path):
    transform = Affine(0.5, 0.0, 20.0, 0.0, -0.5, 61.0)
    data = np.full((4, 3), 10.0, dtype=np.float32)  # 10 people per km2
    data[1, 1] = -1
    path = write_raster(tmp_path / "dens.tif", data, transform=transform, crs="EPSG:4326", nodata=-1)
    d = demand_from_grid(path, values="density_km2")
    for u, w in zip(d.unit.tolist(), d.weight.tolist()):
        r = u // 3
        lat_top = 61.0 - 0.5 * r
        assert w == pytest.approx(10.0 * _geod_cell_area(0, lat_top - 0.5, 0.5, 0.5) / 1e6, rel=1e-6)
    assert len(d) == 11
    conserved(d)
    # counts mode on the same grid takes the values as people
    assert demand_from_grid(path).total == pytest.approx(110.0)


def test_density_grid_projected_uses_planar_area(tmp_path):
    data = np.full((2, 2), 250.0, dtype=np.float32)  # 100 m cells are 0.01 km2
    path = write_raster(tmp_path / "dens.tif", data)
    d = demand_from_grid(path, values="density_km2")
    np.testing.assert_allclose(d.weight, 2.5)


# --------------------------------------------------------------------------- clipping


def _areas_frame(crs="EPSG:32626"):
    import geopandas as gpd
    import shapely

    # two study-area polygons over the 100 m grid at x 500000.., y ..4000000 (one concave, one with a hole)
    a = shapely.Polygon([(500030, 3999990), (500870, 3999700), (500640, 3999120), (500330, 3999510), (500120, 3999220)])
    b = shapely.Polygon(
        [(500910, 3999950), (501480, 3999960), (501470, 3999310), (500950, 3999330)],
        holes=[[(501100, 3999800), (501300, 3999800), (501300, 3999600), (501100, 3999600)]],
    )
    return gpd.GeoDataFrame({"name": ["a", "b"]}, geometry=[a, b], crs=crs)


def _pop_grid(tmp_path):
    rng = np.random.default_rng(11)
    data = rng.gamma(1.0, 20.0, size=(10, 16)).astype(np.float32)
    data[rng.random(data.shape) < 0.2] = -1
    return write_raster(tmp_path / "pop.tif", data, nodata=-1), data


def test_clip_fraction_matches_exactextract(tmp_path):
    from exactextract import exact_extract  # independent zonal statistics (exactextract, PyPI)

    path, _ = _pop_grid(tmp_path)
    areas = _areas_frame()
    ref = exact_extract(str(path), areas, "sum", output="pandas")["sum"].to_numpy()
    for i in range(len(areas)):
        d = demand_from_grid(path, clip=areas.iloc[[i]], clip_mode="fraction", window_rows=3)
        assert d.total == pytest.approx(ref[i], rel=1e-3)  # the 0.1 %; in practice ~1e-9
        assert d.total == pytest.approx(ref[i], rel=1e-7)
        conserved(d)
    both = demand_from_grid(path, clip=areas, clip_mode="fraction", coarsen=3)
    assert both.total == pytest.approx(ref.sum(), rel=1e-7)
    conserved(both)


def test_clip_centre_matches_rasterstats(tmp_path):
    from rasterstats import zonal_stats  # independent zonal statistics (rasterstats, PyPI; cell-centre rule)

    path, _ = _pop_grid(tmp_path)
    areas = _areas_frame()
    ref = [z["sum"] or 0.0 for z in zonal_stats(areas, str(path), stats="sum")]
    for i in range(len(areas)):
        d = demand_from_grid(path, clip=areas.iloc[[i]], window_rows=4)
        assert d.total == pytest.approx(ref[i], rel=1e-6)
        conserved(d)


def test_clip_layer_in_another_crs_and_from_a_file(tmp_path):
    path, _ = _pop_grid(tmp_path)
    areas = _areas_frame()
    gpkg = tmp_path / "areas.gpkg"
    areas.to_crs("EPSG:4326").to_file(gpkg, layer="study", driver="GPKG")
    a = demand_from_grid(path, clip=areas, clip_mode="fraction")
    b = demand_from_grid(path, clip=f"{gpkg}:study", clip_mode="fraction")
    assert b.total == pytest.approx(a.total, rel=1e-4)  # reprojected polygon edges bend slightly
    assert b.summary["dropped"]["outside_clip"]["people"] > 0
    conserved(b)


def test_invalid_clip_polygon_is_repaired_and_reported(tmp_path):
    import geopandas as gpd
    import shapely

    path, _ = _pop_grid(tmp_path)
    bowtie = shapely.Polygon([(500000, 4000000), (500800, 3999000), (500800, 4000000), (500000, 3999000)])
    assert not bowtie.is_valid
    d = demand_from_grid(path, clip=gpd.GeoDataFrame(geometry=[bowtie], crs="EPSG:32626"), clip_mode="fraction")
    assert any("repaired 1 invalid" in n for n in d.summary["notes"])
    conserved(d)


# the sample scenario (sample_layers/ at the repository root); GEOCOVER_SAMPLE_LAYERS points elsewhere
SAMPLE = Path(os.environ.get("GEOCOVER_SAMPLE_LAYERS", Path(__file__).resolve().parents[1] / "sample_layers"))


@pytest.mark.skipif(
    not (SAMPLE / "tarrow_population_100m.tif").exists() or not (SAMPLE / "tarrow.gpkg").exists(),
    reason="sample_layers/tarrow_population_100m.tif and tarrow.gpkg are not in this checkout yet",
)
def test_zonal_sums_over_sample_areas_match_exactextract():
    import geopandas as gpd
    from exactextract import exact_extract  # independent zonal statistics (exactextract, PyPI)

    grid = SAMPLE / "tarrow_population_100m.tif"
    areas = gpd.read_file(SAMPLE / "tarrow.gpkg", layer="census_areas")
    ref = exact_extract(str(grid), areas, "sum", output="pandas")["sum"].to_numpy()
    for i in range(len(areas)):
        d = demand_from_grid(grid, clip=areas.iloc[[i]], clip_mode="fraction")
        assert d.total == pytest.approx(ref[i], rel=1e-3, abs=1e-6)  # the 0.1 %


def test_an_infinity_alone_is_found(tmp_path):
    data = np.ones((4, 4), dtype=np.float32)
    data[3, 2] = np.inf
    path = write_raster(tmp_path / "pop.tif", data)
    with pytest.raises(InputError, match=r"1 cell\(s\).*row 3, column 2"):
        demand_from_grid(path)
    ints = write_raster(tmp_path / "int.tif", np.array([[1, -2], [3, 4]], dtype=np.int16))
    with pytest.raises(InputError, match=r"1 cell\(s\).*row 0, column 1"):
        demand_from_grid(ints)


@pytest.mark.parametrize("k", [1, 2])
def test_rotated_grid_centres_follow_the_affine(tmp_path, k):
    transform = Affine(100.0, 0.0, 500000.0, 0.0, -100.0, 4000000.0) @ Affine.rotation(20.0)
    data = np.arange(1, 13, dtype=np.float32).reshape(3, 4)
    path = write_raster(tmp_path / "rot.tif", data, transform=transform)
    d = demand_from_grid(path, coarsen=k)
    ref = _brute_coarsen(data, transform, k)
    for i, u in enumerate(d.unit.tolist()):
        s, x, y = ref[u]
        assert d.weight[i] == pytest.approx(s)
        assert d.xy[i].tolist() == pytest.approx([x, y], abs=1e-6)
        # farthest corner of the block (cut at the grid's edge), by the affine directly
        r0, c0 = divmod(u, 4)
        r1, c1 = min(r0 + k, 3), min(c0 + k, 4)
        cx, cy = apply_affine(transform, np.array([c0, c1, c0, c1]), np.array([r0, r0, r1, r1]))
        assert d.footprint[i] == pytest.approx(np.hypot(cx - x, cy - y).max(), rel=1e-9)
        assert d.footprint[i] >= 50.0 * math.hypot(r1 - r0, c1 - c0) - 1e-6
        if (r1 - r0, c1 - c0) == (k, k):
            assert d.footprint[i] >= 50.0 * k * math.sqrt(2) - 1e-6
    if k == 1:  # a rotated square cell still has half its diagonal as footprint
        np.testing.assert_allclose(d.footprint, 50.0 * math.sqrt(2))


def test_per_dataset_mask_is_nodata(tmp_path):
    import rasterio

    data = np.full((3, 4), 5.0, dtype=np.float32)
    path = write_raster(tmp_path / "masked.tif", data)
    mask = np.full((3, 4), 255, dtype=np.uint8)
    mask[1, 1:3] = 0
    with rasterio.Env(GDAL_TIFF_INTERNAL_MASK=True), rasterio.open(path, "r+") as dst:
        dst.write_mask(mask)
    d = demand_from_grid(path)
    assert d.total == 50.0 and len(d) == 10
    assert d.summary["dropped"]["nodata"]["cells"] == 2
    assert 5 not in d.unit.tolist() and 6 not in d.unit.tolist()


def test_projected_grid_into_another_working_crs(tmp_path):
    from pyproj import Transformer

    data = np.array([[1.0, 0.0], [2.0, 3.0]], dtype=np.float32)
    path = write_raster(tmp_path / "pop.tif", data)
    d = demand_from_grid(path, crs="EPSG:3857")
    tr = Transformer.from_crs("EPSG:32626", "EPSG:3857", always_xy=True)
    for i, u in enumerate(d.unit.tolist()):
        r, c = divmod(u, 2)
        assert d.xy[i].tolist() == pytest.approx(list(tr.transform(*apply_affine(UTM, c + 0.5, r + 0.5))), abs=1e-6)
    # Web Mercator stretches distances by about 1 / cos(latitude ~36 deg) here, and the footprint follows
    assert (d.footprint > 50 * math.sqrt(2) * 1.2).all() and (d.footprint < 50 * math.sqrt(2) * 1.3).all()
    assert any("reprojected" in n for n in d.summary["notes"])


@pytest.mark.parametrize("nodata", [-1.0, 0.0, float("nan"), 3.0e38, None])
@pytest.mark.parametrize("bad", [None, -2.0, float("nan"), float("inf")])
def test_clean_and_unclean_windows_give_the_cells_themselves(tmp_path, nodata, bad):
    # float windows are judged clean by counting (fast path) or not (general path); with window_rows=3 a
    # grid mixes both.  Expected values straight from the array: one point per cell holding people.
    rng = np.random.default_rng(7)
    data = rng.gamma(0.6, 25.0, size=(10, 7)).astype(np.float32)
    data[rng.random(data.shape) < 0.4] = 0.0
    if nodata is not None:
        data[rng.random(data.shape) < 0.15] = nodata
    if bad is not None:
        data[7, 2] = bad  # only the window of rows 6-8 holds it
    path = write_raster(tmp_path / "pop.tif", data, nodata=nodata)
    d = demand_from_grid(path, bad_values="zero", window_rows=3)
    is_nod = np.zeros(data.shape, bool) if nodata is None else (np.isnan(data) if math.isnan(nodata) else data == nodata)
    people = (data > 0) & np.isfinite(data) & ~is_nod
    rows, cols = np.nonzero(people)
    assert d.unit.tolist() == (rows * 7 + cols).tolist()
    assert d.weight.tolist() == data[people].astype(np.float64).tolist()
    x, y = apply_affine(UTM, cols + 0.5, rows + 0.5)
    assert np.array_equal(d.xy, np.column_stack([x, y]))
    assert d.summary["dropped"].get("nodata", {"cells": 0})["cells"] == int(is_nod.sum())
    n_bad = int((~is_nod & ~(np.isfinite(data) & (data >= 0))).sum())  # a NaN is nodata when nodata is NaN
    assert n_bad == (0 if bad is None or (math.isnan(bad) and nodata is not None and math.isnan(nodata)) else 1)
    assert d.summary["dropped"].get("bad_values", {"cells": 0})["cells"] == n_bad
    conserved(d)
    if n_bad:
        with pytest.raises(InputError, match="row 7, column 2"):
            demand_from_grid(path, window_rows=3)
