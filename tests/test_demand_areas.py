"""demand_from_areas and demand_from_points: polygons and points with a population field -> demand points."""

from __future__ import annotations

import logging
import math

import geopandas as gpd
import numpy as np
import pytest
import shapely
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st

from geocover.demand import demand_from_areas, demand_from_points
from geocover.errors import CRSError, LayerError, ParameterError

from test_demand_fixtures import write_raster
from test_demand_grid import SAMPLE  # the same sample-layer location and skip rule

CRS = "EPSG:32626"


def areas():
    concave = shapely.Polygon([(0, 0), (3000, 0), (3000, 3000), (2000, 3000), (2000, 1000), (1000, 1000), (1000, 3000), (0, 3000)])
    holed = shapely.Polygon([(4000, 0), (7000, 0), (7000, 2500), (4000, 2500)], holes=[[(5000, 500), (6000, 500), (6000, 2000), (5000, 2000)]])
    multi = shapely.MultiPolygon([shapely.box(8000, 0, 8400, 300), shapely.box(9000, 1000, 9900, 2700)])
    tiny = shapely.box(10500, 10, 10540, 35)  # smaller than any lattice cell used below
    empty_pop = shapely.box(12000, 0, 13000, 1000)
    return gpd.GeoDataFrame(
        {"pop": [1200.0, 830.5, 77.0, 3.0, 0.0], "name": list("abcde")},
        geometry=[concave, holed, multi, tiny, empty_pop],
        crs=CRS,
    )


def check_conserved(d, frame, field="pop"):
    pop = frame[field].to_numpy(float)
    for row in range(len(frame)):
        got = d.weight[d.unit == row]
        assert math.fsum(got) == pytest.approx(pop[row], rel=1e-12, abs=1e-12), row
    assert d.summary["people_out"] == pytest.approx(d.summary["people_in"], rel=1e-12)
    assert d.summary["people_in"] == pytest.approx(pop.sum(), rel=1e-12)


def all_inside(d, frame):
    geoms = frame.geometry.to_numpy()[d.unit]
    return bool(shapely.intersects_xy(geoms, d.xy[:, 0], d.xy[:, 1]).all())


def brute_farthest(poly, x, y):
    return max(math.hypot(px - x, py - y) for px, py in shapely.get_coordinates(poly))


@pytest.mark.parametrize("placement", ["centroid", "inside"])
def test_one_point_per_populated_polygon(placement):
    frame = areas()
    d = demand_from_areas(frame, "pop", placement=placement)
    assert d.unit.tolist() == [0, 1, 2, 3]  # the polygon of zero people makes no point
    assert d.weight.tolist() == [1200.0, 830.5, 77.0, 3.0]
    assert d.summary["features_empty"] == 1
    for i, row in enumerate(d.unit):
        poly = frame.geometry[row]
        assert d.footprint[i] == pytest.approx(brute_farthest(poly, *d.xy[i]), rel=1e-12)
    check_conserved(d, frame)
    if placement == "centroid":
        c = frame.geometry[0].centroid
        assert d.xy[0].tolist() == pytest.approx([c.x, c.y])
        # the U-shape's centroid is in the notch; the summary says so
        assert d.summary["centroids_outside"] >= 1
        assert any("outside their polygon" in n for n in d.summary["notes"])
    else:
        assert all_inside(d, frame)


def test_spread_over_lattice_conserves_each_polygon_and_stays_inside():
    frame = areas()
    d = demand_from_areas(frame, "pop", placement="spread", spacing_m="250 m")
    check_conserved(d, frame)
    assert all_inside(d, frame)
    assert (d.unit == 0).sum() > 50  # the big polygon is many points, not one
    assert d.summary["polygons_single_point"] == 0
    # tiny polygon: one piece, at a point inside
    assert (d.unit == 3).sum() == 1
    # a cell wholly inside has half the lattice-cell diagonal as footprint
    assert d.footprint.min() <= 125 * math.sqrt(2) + 1e-9
    assert (d.footprint <= 250 * math.sqrt(2) + 1e-9).all()


def test_lattice_shares_follow_area():
    # people on each side of the lattice line x = 1500 follow the polygon's area on that side
    frame = areas().iloc[[0]]
    d = demand_from_areas(frame, "pop", placement="spread", spacing_m=250)
    poly = frame.geometry.iloc[0]
    left = shapely.clip_by_rect(poly, -1e9, -1e9, 1500, 1e9).area / poly.area
    assert d.weight[d.xy[:, 0] < 1500].sum() == pytest.approx(1200.0 * left, rel=1e-12)


def _weight_grid(tmp_path, crs=CRS):
    rng = np.random.default_rng(5)
    w = rng.random((30, 110)).astype(np.float32)
    w[w < 0.35] = 0.0
    w[0, :5] = -1
    transform = Affine(100.0, 0.0, -200.0, 0.0, -100.0, 2900.0)
    return write_raster(tmp_path / "w.tif", w, nodata=-1, transform=transform, crs=crs), w, transform


def test_spread_over_weight_raster_follows_cell_weights(tmp_path):
    path, w, transform = _weight_grid(tmp_path)
    # a polygon of whole cells: shares are exactly the cell values over their sum
    box = shapely.box(1000, 500, 1500, 1200)  # cols 12..16, rows 17..23
    frame = gpd.GeoDataFrame({"pop": [500.0]}, geometry=[box], crs=CRS)
    d = demand_from_areas(frame, "pop", placement="spread", weight_raster=path)
    sub = w[17:24, 12:17].astype(np.float64)
    assert len(d) == int((sub > 0).sum())
    np.testing.assert_allclose(np.sort(d.weight), np.sort(500.0 * sub[sub > 0] / sub.sum()), rtol=1e-9)
    np.testing.assert_allclose(d.footprint, 50 * math.sqrt(2))
    # the points are the cell centres
    cols = (d.xy[:, 0] - transform.c) / 100.0 - 0.5
    np.testing.assert_allclose(cols, np.round(cols), atol=1e-9)


def test_south_up_weight_raster_gives_the_same_spread(tmp_path):
    # the same weights stored bottom row first (positive y pixel size) must spread the same way
    path, w, transform = _weight_grid(tmp_path)
    flipped = Affine(100.0, 0.0, transform.c, 0.0, 100.0, transform.f - 100.0 * w.shape[0])
    south_up = write_raster(tmp_path / "w_south_up.tif", w[::-1].copy(), nodata=-1, transform=flipped, crs=CRS)
    frame = areas()
    a = demand_from_areas(frame, "pop", placement="spread", weight_raster=path)
    b = demand_from_areas(frame, "pop", placement="spread", weight_raster=south_up)
    order_a = np.lexsort((a.xy[:, 1], a.xy[:, 0], a.unit))
    order_b = np.lexsort((b.xy[:, 1], b.xy[:, 0], b.unit))
    np.testing.assert_array_equal(a.unit[order_a], b.unit[order_b])
    np.testing.assert_allclose(a.xy[order_a], b.xy[order_b], atol=1e-6)
    np.testing.assert_allclose(a.weight[order_a], b.weight[order_b], rtol=1e-9)
    check_conserved(b, frame)


def test_spread_over_weight_raster_conserves_and_stays_inside(tmp_path):
    path, _, _ = _weight_grid(tmp_path)
    frame = areas()
    d = demand_from_areas(frame, "pop", placement="spread", weight_raster=path)
    check_conserved(d, frame)
    assert all_inside(d, frame)
    assert d.summary["spread_by"] == "weight_raster"


def test_spread_weight_raster_in_another_crs(tmp_path):
    path, _, _ = _weight_grid(tmp_path)
    frame = areas()
    d = demand_from_areas(frame, "pop", placement="spread", weight_raster=path, crs="EPSG:3857")
    assert d.crs == "EPSG:3857"
    check_conserved(d, frame)
    assert all_inside(d, frame.to_crs("EPSG:3857"))


def test_polygon_without_weight_falls_back_to_lattice_or_inside_point(tmp_path):
    path, _, _ = _weight_grid(tmp_path)
    far = gpd.GeoDataFrame({"pop": [40.0, 10.0]}, geometry=[shapely.box(50000, 0, 52000, 2000), shapely.box(1000, 500, 1500, 1200)], crs=CRS)
    d = demand_from_areas(far, "pop", placement="spread", weight_raster=path)
    assert (d.unit == 0).sum() == 1 and d.summary["polygons_single_point"] == 1
    assert any("one inside point" in n for n in d.summary["notes"])
    d = demand_from_areas(far, "pop", placement="spread", weight_raster=path, spacing_m=500)
    assert (d.unit == 0).sum() == 16 and d.summary["polygons_by_lattice"] == 1
    check_conserved(d, far)


polygons = st.builds(
    lambda pts, r: shapely.convex_hull(shapely.MultiPoint(pts)).buffer(r, quad_segs=3),
    st.lists(st.tuples(st.floats(0, 5000), st.floats(0, 5000)), min_size=1, max_size=8),
    st.floats(1.0, 800.0),
)


@settings(max_examples=40, deadline=None)
@given(st.lists(polygons, min_size=1, max_size=4), st.lists(st.floats(0.0, 1e6), min_size=4, max_size=4), st.floats(50.0, 2000.0))
def test_spread_property_conserves_and_stays_inside(polys, pops, spacing):
    frame = gpd.GeoDataFrame({"pop": pops[: len(polys)]}, geometry=polys, crs=CRS)
    d = demand_from_areas(frame, "pop", placement="spread", spacing_m=spacing)
    check_conserved(d, frame)
    assert all_inside(d, frame)


def test_invalid_polygons_are_repaired_and_counted():
    bowtie = shapely.Polygon([(0, 0), (1000, 1000), (1000, 0), (0, 1000)])
    spike = shapely.Polygon([(2000, 0), (3000, 0), (3000, 1000), (2500, 1000), (2500, 1500), (2500, 1000), (2000, 1000)])
    frame = gpd.GeoDataFrame({"pop": [10.0, 20.0, 5.0]}, geometry=[bowtie, spike, shapely.box(4000, 0, 4100, 100)], crs=CRS)
    assert not bowtie.is_valid and not spike.is_valid
    d = demand_from_areas(frame, "pop", placement="spread", spacing_m=100)
    assert "repaired 2 invalid polygon(s) with make_valid" in d.summary["notes"]
    check_conserved(d, frame)
    assert all_inside(d, gpd.GeoDataFrame(geometry=shapely.make_valid(frame.geometry.to_numpy()), crs=CRS))


def test_population_field_errors_name_field_and_features():
    frame = areas()
    with pytest.raises(LayerError, match=r"no field 'people'.*numeric fields are: pop"):
        demand_from_areas(frame, "people")
    with pytest.raises(LayerError, match=r"'name' .* not numeric"):
        demand_from_areas(frame, "name")
    bad = frame.copy()
    bad.loc[[1, 3], "pop"] = np.nan
    with pytest.raises(LayerError, match=r"'pop' .* no value for 2 feature\(s\) \(ids 1, 3\)"):
        demand_from_areas(bad, "pop")
    bad = frame.copy()
    bad.loc[2, "pop"] = -4
    with pytest.raises(LayerError, match=r"negative or infinite for 1 feature\(s\) \(ids 2"):
        demand_from_areas(bad, "pop")


def test_parameter_errors():
    frame = areas()
    with pytest.raises(ParameterError, match="'centroid', 'inside', 'spread'") as err:
        demand_from_areas(frame, "pop", placement="middle")
    assert err.value.param == "placement"
    with pytest.raises(ParameterError, match="weight_raster .* or spacing_m") as err:
        demand_from_areas(frame, "pop", placement="spread")
    with pytest.raises(ParameterError):
        demand_from_areas(frame, "pop", placement="centroid", spacing_m=100)
    with pytest.raises(ParameterError) as err:
        demand_from_areas(frame, "pop", placement="spread", spacing_m="-5 m")
    assert err.value.param == "spacing_m"
    with pytest.raises(ParameterError, match="larger spacing"):
        demand_from_areas(frame, "pop", placement="spread", spacing_m=1)
    with pytest.raises(CRSError):
        demand_from_areas(frame, "pop", crs="EPSG:4326")
    with pytest.raises(CRSError, match="no CRS"):
        demand_from_areas(frame.set_crs(None, allow_override=True), "pop")


def test_points_layer_is_not_areas():
    pts = gpd.GeoDataFrame({"pop": [1.0]}, geometry=[shapely.Point(0, 0)], crs=CRS)
    with pytest.raises(LayerError, match="demand_from_points"):
        demand_from_areas(pts, "pop")
    # a point layer with a feature of no geometry (and nobody in it) is still recognised as points
    holey = gpd.GeoDataFrame({"pop": [1.0, 0.0]}, geometry=[shapely.Point(0, 0), None], crs=CRS)
    with pytest.raises(LayerError, match="demand_from_points"):
        demand_from_areas(holey, "pop")


def test_reads_a_geopackage_layer_in_lonlat_and_chooses_a_local_crs(tmp_path, caplog):
    frame = areas()
    frame.geometry = frame.geometry.translate(500000, 4000000)
    gpkg = tmp_path / "census.gpkg"
    frame.to_crs("EPSG:4326").to_file(gpkg, layer="census_areas", driver="GPKG")
    frame.iloc[:1].to_file(gpkg, layer="other", driver="GPKG")
    with caplog.at_level(logging.INFO, logger="geocover"):
        d = demand_from_areas(f"{gpkg}:census_areas", "pop", placement="inside")
    assert d.crs == "EPSG:32626" and "EPSG:32626" in caplog.text
    assert d.summary["source_crs"] == "EPSG:4326"
    check_conserved(d, frame)
    with pytest.raises(LayerError, match="holds 2 layers"):
        demand_from_areas(gpkg, "pop")


def test_demand_from_points():
    frame = gpd.GeoDataFrame(
        {"people": [3.0, 4.0, 0.0, 2.5]},
        geometry=[shapely.Point(10, 20), shapely.MultiPoint([(0, 0), (5, 5)]), shapely.Point(1, 1), shapely.Point(7, 8)],
        crs=CRS,
    )
    d = demand_from_points(frame, "people")
    assert d.xy.tolist() == [[10, 20], [0, 0], [5, 5], [7, 8]]
    assert d.weight.tolist() == [3.0, 2.0, 2.0, 2.5]
    assert d.unit.tolist() == [0, 1, 1, 3]
    assert (d.footprint == 0).all()
    assert d.summary["features_empty"] == 1 and d.summary["people_out"] == d.summary["people_in"] == 9.5
    ones = demand_from_points(frame, None)
    assert ones.total == 4.0  # one per feature; the multipoint shares its 1
    with pytest.raises(LayerError, match="not points.*demand_from_areas"):
        demand_from_points(areas(), "pop")
    with pytest.raises(LayerError, match="no field"):
        demand_from_points(frame, "pop")


@pytest.mark.skipif(
    not (SAMPLE / "tarrow.gpkg").exists() or not (SAMPLE / "tarrow_population_100m.tif").exists(),
    reason="sample_layers/tarrow.gpkg and tarrow_population_100m.tif are not in this checkout yet",
)
@pytest.mark.parametrize("placement, extra", [("centroid", {}), ("inside", {}), ("spread", {"spacing_m": "250 m"}), ("spread", {"weight_raster": True})])
def test_sample_census_areas_conserve_in_every_mode(placement, extra):
    layer = f"{SAMPLE / 'tarrow.gpkg'}:census_areas"
    frame = gpd.read_file(SAMPLE / "tarrow.gpkg", layer="census_areas")
    if extra.get("weight_raster"):
        extra = {"weight_raster": SAMPLE / "tarrow_population_100m.tif"}
    d = demand_from_areas(layer, "pop", placement=placement, **extra)
    check_conserved(d, frame)
    if placement != "centroid":
        assert all_inside(d, frame)
