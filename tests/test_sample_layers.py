"""Checks on the invented Tarrow Isle sample data in ``sample_layers/``.

These read the committed files (rebuilt by ``sample_layers/build_sample.py``)
and check the promises the README makes about them, partly with libraries
from outside the project: exactextract for zonal sums, networkx for graph
connectivity.
"""

from __future__ import annotations

import csv
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import rasterio
import shapely
from rasterio.features import rasterize

SAMPLE = Path(__file__).resolve().parents[1] / "sample_layers"
GPKG = SAMPLE / "tarrow.gpkg"
POP_TIF = SAMPLE / "tarrow_population_100m.tif"
LU_TIF = SAMPLE / "tarrow_land_use_100m.tif"
LU_CSV = SAMPLE / "tarrow_land_use_classes.csv"

# layer -> (geometry types allowed, {field: numpy dtype kind})
LAYERS = {
    "study_area": ({"Polygon"}, {"name": "O"}),
    "census_areas": ({"Polygon", "MultiPolygon"}, {"area_code": "O", "area_name": "O", "pop": "i"}),
    "river": ({"LineString"}, {"name": "O"}),
    "flood_zones": ({"Polygon"}, {"zone_class": "O", "depth_m": "f"}),
    "protected_land": ({"Polygon", "MultiPolygon"}, {"name": "O", "designation": "O"}),
    "roads": ({"LineString"}, {"road_id": "i", "road_class": "O", "speed_kmh": "f", "oneway": "i"}),
    "existing_stations": ({"Point"}, {"station_id": "O", "name": "O", "status": "O", "cost": "f"}),
    "candidate_parcels": ({"Polygon"}, {"parcel_id": "O", "cost": "f", "owner": "O"}),
}


def _kind(series) -> str:
    kind = np.asarray(series).dtype.kind
    return "O" if kind in "OUT" else kind  # strings may come back as object or a string dtype


@pytest.fixture(scope="module")
def layers():
    return {name: gpd.read_file(GPKG, layer=name) for name in LAYERS}


@pytest.fixture(scope="module")
def pop():
    with rasterio.open(POP_TIF) as src:
        return src.read(1), src.profile, src.transform


@pytest.fixture(scope="module")
def grid_total(pop):
    arr, profile, _ = pop
    return float(arr[arr != profile["nodata"]].astype(np.float64).sum())


# ------------------------------------------------------------------ rasters


def test_population_grid_shape_crs_and_encoding(pop):
    arr, profile, transform = pop
    assert profile["crs"].to_epsg() == 32626
    assert (profile["width"], profile["height"]) == (400, 300)
    assert arr.dtype == np.float32
    assert profile["nodata"] == -1.0
    assert (transform.a, transform.e) == (100.0, -100.0)
    assert (transform.c, transform.f) == (480_000.0, 4_990_000.0)  # lower-left is (480000, 4960000)
    assert profile["tiled"] and profile["compress"] == "deflate"


def test_population_values_and_total(pop, grid_total):
    arr, _, _ = pop
    sea = arr == -1.0
    land = ~sea
    assert np.all(arr[land] >= 0.0)
    assert 230_000 <= grid_total <= 270_000
    # an island: every edge cell is sea, and land fills most of the rectangle
    assert sea[0].all() and sea[-1].all() and sea[:, 0].all() and sea[:, -1].all()
    assert 0.55 < land.mean() < 0.95
    # populated cells are a minority of land, and some cells are dense (towns)
    assert 0.2 < (arr[land] > 0).mean() < 0.9
    assert arr.max() > 50.0


def test_land_use_grid_matches_population_grid(pop):
    arr, pprof, ptrans = pop
    with rasterio.open(LU_TIF) as src:
        lu = src.read(1)
        assert src.crs.to_epsg() == 32626
        assert src.transform == ptrans and src.shape == arr.shape
        assert src.nodata == 0 and lu.dtype == np.uint8
    with open(LU_CSV, newline="") as fh:
        classes = {int(r["code"]): r["name"] for r in csv.DictReader(fh)}
    assert classes == {1: "residential", 2: "commercial", 3: "industrial", 4: "agriculture",
                       5: "forest", 6: "wetland", 7: "water"}
    # sea is nodata in both grids, and only there
    np.testing.assert_array_equal(lu == 0, arr == -1.0)
    assert set(np.unique(lu[lu > 0])) == set(classes)
    # consistent with the people: nobody lives on water or in the wetland,
    # and residential cells are far denser than farmland
    assert arr[(lu == 7) | (lu == 6)].max() == 0.0
    assert arr[lu == 1].mean() > 5 * arr[lu == 4].mean()


# ------------------------------------------------------------------ vector layers


@pytest.mark.parametrize("name", sorted(LAYERS))
def test_layer_fields_geometry_and_crs(layers, name):
    gdf = layers[name]
    geom_types, fields = LAYERS[name]
    assert len(gdf) > 0
    assert gdf.crs.to_epsg() == 32626
    assert set(gdf.geom_type) <= geom_types
    assert gdf.is_valid.all()
    for field, kind in fields.items():
        assert field in gdf.columns, f"{name} lacks field {field}"
        assert _kind(gdf[field]) == kind, f"{name}.{field} has dtype {gdf[field].dtype}"
        assert gdf[field].notna().all()


def test_everything_lies_on_the_island(layers):
    island = layers["study_area"].geometry.iloc[0].buffer(1.0)
    for name in ("census_areas", "river", "flood_zones", "protected_land", "roads",
                 "existing_stations", "candidate_parcels"):
        assert layers[name].within(island).all(), name


def test_census_areas_tile_the_island(layers):
    census = layers["census_areas"]
    island = layers["study_area"].geometry.iloc[0]
    assert 60 <= len(census) <= 120
    assert census["area_code"].is_unique and census["area_code"].str.fullmatch(r"TI-\d{3}").all()
    # no overlaps (sum of areas = area of the union) and no gaps (= island area)
    total = census.area.sum()
    assert total == pytest.approx(census.union_all().area, rel=1e-9)
    assert total == pytest.approx(island.area, rel=1e-9)


def test_census_total_equals_grid_total(layers, grid_total):
    # common practice: census areas and grids are reconciled before use
    assert layers["census_areas"]["pop"].sum() == pytest.approx(grid_total, rel=0.005)
    assert (layers["census_areas"]["pop"] >= 0).all()


def test_census_pop_matches_exactextract_zonal_sums(layers):
    # exactextract is the independent zonal statistics library (exact
    # cell-coverage fractions), not part of geocover or of the build script
    from exactextract import exact_extract

    census = layers["census_areas"]
    stats = exact_extract(str(POP_TIF), census, "sum", include_cols=["area_code"], output="pandas")
    assert list(stats["area_code"]) == list(census["area_code"])
    zonal = stats["sum"].to_numpy()
    pop = census["pop"].to_numpy()
    assert zonal.sum() == pytest.approx(pop.sum(), rel=0.001)
    # per area: the build rounds each area's exact sum to an integer so that the
    # integers add up to the rounded grid total (largest remainders), which
    # moves any one area by less than one person; nothing else may differ
    assert np.abs(zonal - pop).max() < 1.0


def test_census_pop_does_not_depend_on_the_overlay_rule(layers, pop):
    # the README promises "cell centre inside the area" gives the same sums as
    # area-weighted overlap; rasterio.features.rasterize assigns by centre
    arr, _, transform = pop
    census = layers["census_areas"]
    label = rasterize([(g, i + 1) for i, g in enumerate(census.geometry)], out_shape=arr.shape,
                      transform=transform, fill=0, dtype="int32")
    people = np.where(arr > 0, arr, 0.0).astype(np.float64)
    assert people[label == 0].sum() == 0.0  # no populated cell falls outside every area
    by_centre = np.bincount(label.ravel(), weights=people.ravel(), minlength=len(census) + 1)[1:]
    assert np.abs(by_centre - census["pop"].to_numpy()).max() < 1.0


def test_river_runs_from_inland_to_the_coast(layers):
    river = layers["river"]
    coast = layers["study_area"].geometry.iloc[0].exterior
    main = river.geometry.iloc[0]
    start, end = shapely.Point(main.coords[0]), shapely.Point(main.coords[-1])
    assert end.distance(coast) < 1.0
    assert start.distance(coast) > 5_000.0
    # the tributary ends on a vertex of the main river
    if len(river) > 1:
        joins = {tuple(c) for c in main.coords}
        for trib in river.geometry.iloc[1:]:
            assert tuple(trib.coords[-1]) in joins


def test_flood_zones_classes_depths_and_no_overlap(layers):
    zones = layers["flood_zones"]
    assert set(zones["zone_class"]) == {"A", "AE", "X"}
    assert (zones["depth_m"] > 0).all()
    assert zones.area.sum() == pytest.approx(zones.union_all().area, rel=1e-9)
    # the river runs through high-hazard zones
    high = zones[zones["zone_class"].isin(["A", "AE"])].union_all()
    assert layers["river"].geometry.iloc[0].intersection(high).length > 5_000.0


def test_protected_land(layers):
    prot = layers["protected_land"]
    assert 1 <= len(prot) <= 3
    assert {"nature reserve", "wetland"} <= set(prot["designation"])


# ------------------------------------------------------------------ roads


def test_roads_attributes(layers):
    roads = layers["roads"]
    assert len(roads) <= 5_000
    assert roads["road_id"].is_unique
    assert set(roads["road_class"]) == {"arterial", "collector", "local", "track"}
    assert set(roads["oneway"]) == {0, 1}
    assert (roads["speed_kmh"] > 0).all()
    # README: rural tracks run at 30-40 km/h (spurs 30, through tracks 40), two-way
    tracks = roads[roads["road_class"] == "track"]
    assert tracks["speed_kmh"].between(30.0, 40.0).all()
    assert (tracks["oneway"] == 0).all()
    # length-weighted: arterials are slower inside towns, but mostly fast
    length = roads.length
    mean_speed = (roads["speed_kmh"] * length).groupby(roads["road_class"]).sum() / length.groupby(
        roads["road_class"]).sum()
    assert mean_speed["arterial"] > mean_speed["collector"] > mean_speed["local"] > mean_speed["track"]


def test_roads_reach_the_countryside(layers, pop):
    # README: at least 97 % of the people (grid total) live within 500 m of a
    # road.  Each populated cell's people are placed at its centre; the distance
    # to the nearest road line is measured by shapely (GEOS) through an STRtree.
    arr, _, transform = pop
    rows, cols = np.nonzero(arr > 0)
    people = arr[rows, cols].astype(np.float64)
    x = transform.c + (cols + 0.5) * transform.a
    y = transform.f + (rows + 0.5) * transform.e
    roads = layers["roads"].geometry.values
    (cell, _), dist = shapely.STRtree(roads).query_nearest(shapely.points(x, y), return_distance=True,
                                                           all_matches=False)
    nearest = np.full(len(people), np.inf)
    nearest[cell] = dist
    assert np.isfinite(nearest).all()
    share_500 = people[nearest <= 500.0].sum() / people.sum()
    assert share_500 >= 0.97, f"only {share_500:.2%} of the people live within 500 m of a road"
    # spot check of the tree query: brute-force distances to every road for a sample of cells
    pick = np.linspace(0, len(people) - 1, 25).astype(int)
    brute = [shapely.distance(shapely.Point(x[i], y[i]), roads).min() for i in pick]
    np.testing.assert_allclose(nearest[pick], brute, rtol=0, atol=1e-6)


def test_roads_keep_off_parcels_and_rivers(layers):
    # README: parcels lie off the roads; rural tracks do not cross the river or the burn
    roads = layers["roads"]
    parcels = layers["candidate_parcels"].geometry.values
    p_idx, _ = shapely.STRtree(roads.geometry.values).query(parcels, predicate="dwithin", distance=8.0)
    assert len(p_idx) == 0
    rivers = layers["river"].union_all()
    assert not roads[roads["road_class"] == "track"].intersects(rivers).any()


def test_one_way_streets_are_an_opposed_pair(layers):
    # README: a one-way pair in the town core, traffic in the digitised direction
    oneway = layers["roads"].query("oneway == 1")
    assert set(oneway["road_class"]) == {"local"}
    d = np.array([np.subtract(g.coords[-1], g.coords[0]) for g in oneway.geometry])
    d /= np.hypot(d[:, 0], d[:, 1])[:, None]
    cos = d @ d[0]
    assert np.all(np.abs(np.abs(cos) - 1.0) < 1e-6)  # all parallel
    assert (cos > 0).sum() >= 3 and (cos < 0).sum() >= 3  # both directions used


def test_roads_form_one_graph_by_shared_vertices(layers):
    # networkx (independent graph library) builds the graph: nodes are vertex
    # coordinates, edges join consecutive vertices of each line
    import networkx as nx

    graph = nx.Graph()
    for geom in layers["roads"].geometry:
        coords = [tuple(c) for c in geom.coords]
        graph.add_edges_from(zip(coords[:-1], coords[1:]))
    assert nx.number_connected_components(graph) == 1


def test_roads_meet_only_at_shared_vertices(layers):
    # a crossing without a shared vertex would be an unusable junction
    geoms = layers["roads"].geometry.values
    vertices = [{tuple(c) for c in g.coords} for g in geoms]
    tree = shapely.STRtree(geoms)
    a, b = tree.query(geoms, predicate="intersects")
    keep = a < b
    for i, j in zip(a[keep], b[keep]):
        touch = geoms[i].intersection(geoms[j])
        assert touch.geom_type in ("Point", "MultiPoint"), (i, j, touch.geom_type)
        for p in shapely.get_parts(touch):
            assert (p.x, p.y) in vertices[i] and (p.x, p.y) in vertices[j], (i, j)


# ------------------------------------------------------------------ sites


def test_existing_stations(layers):
    st = layers["existing_stations"]
    assert len(st) == 4
    assert (st["status"] == "kept").sum() == 3 and (st["status"] == "optional").sum() == 1
    assert st["station_id"].is_unique
    assert (st["cost"] == 0.0).all()
    flood = layers["flood_zones"].union_all()
    kept = st[st["status"] == "kept"]
    assert not kept.intersects(flood).any()
    # the optional one is the deliberate case inside a high flood zone
    high = layers["flood_zones"].query("zone_class in ('A', 'AE')").union_all()
    assert st[st["status"] == "optional"].intersects(high).all()


def test_candidate_parcels(layers):
    parcels = layers["candidate_parcels"]
    assert 250 <= len(parcels) <= 350
    assert parcels["parcel_id"].is_unique
    assert parcels["cost"].between(800_000.0, 2_500_000.0).all()
    assert set(parcels["owner"]) == {"public", "private"}
    assert parcels.area.between(50.0 * 50.0 * 0.99, 200.0 * 200.0 * 1.01).all()
    zones = layers["flood_zones"]
    high = zones[zones["zone_class"].isin(["A", "AE"])].geometry
    prot = layers["protected_land"].geometry
    near_any = shapely.union_all([*zones.geometry, *prot]).buffer(50.0)
    near_hard = shapely.union_all([*high, *prot]).buffer(50.0)
    share = parcels.intersects(near_any).mean()
    assert 0.15 <= share <= 0.25
    # the attribute filter zone_class in ("A", "AE") changes the verdict for some parcels
    assert parcels.intersects(near_hard).sum() < parcels.intersects(near_any).sum()


def test_parcels_do_not_overlap_each_other(layers):
    geoms = layers["candidate_parcels"].geometry.values
    a, b = shapely.STRtree(geoms).query(geoms, predicate="intersects")
    assert np.all(a == b)


def test_road_dead_ends_are_not_near_misses(layers):
    # a dead end lying within 1 m of another road is an undershoot that
    # should have been a shared vertex (common practice in network cleaning)
    geoms = layers["roads"].geometry.values
    degree: dict[tuple, int] = {}
    for g in geoms:
        for end in (g.coords[0], g.coords[-1]):
            degree[tuple(end)] = degree.get(tuple(end), 0) + 1
    dead = [(i, shapely.Point(g.coords[k])) for i, g in enumerate(geoms) for k in (0, -1)
            if degree[tuple(g.coords[k])] == 1]
    assert dead, "a road network of towns and villages has some dead ends"
    tree = shapely.STRtree(geoms)
    pts = np.array([p for _, p in dead], dtype=object)
    own = np.array([i for i, _ in dead])
    p_idx, g_idx = tree.query(pts, predicate="dwithin", distance=1.0)
    assert np.all(g_idx == own[p_idx])
