"""Exclusion-zone clearance: verdicts, rejecting features and nearest distances against brute force.

Independent check: every (site, zone) distance measured by shapely
(``shapely.distance`` / ``shapely.intersects``, i.e. GEOS) on the raw
geometries, then the rule applied by hand: rejected when a distance is below
the setback (intersecting, for a setback of 0), the rejecting feature the
nearest, ties to the lowest feature id; ``nearest_exclusion_m`` the least
distance.  The zones mix every kind the grid path handles (polygons, holes,
multipolygons, lines, points) and those it hands to GEOS (a big zone, one
with many vertices, a collection); the sites include points on vertices and
edges, in holes, inside zones and far outside the zones' extent.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import shapely
from shapely.geometry import LineString, MultiPoint, MultiPolygon, Point, Polygon, box

from geocover import clearance
from geocover.sites import Exclusion, screen_sites

CRS = "EPSG:32626"
X0, Y0 = 500_000.0, 4_000_000.0


def _zones(seed: int) -> gpd.GeoDataFrame:
    rng = np.random.default_rng(seed)
    geoms = []
    ang = np.linspace(0, 2 * np.pi, 12, endpoint=False)
    for cx, cy in rng.uniform(0, 3000, size=(60, 2)):
        r = rng.uniform(20, 120) * rng.uniform(0.6, 1.0, size=12)
        geoms.append(Polygon(np.c_[X0 + cx + r * np.cos(ang), Y0 + cy + r * np.sin(ang)]))
    for cx, cy in rng.uniform(0, 3000, size=(10, 2)):
        geoms.append(box(X0 + cx, Y0 + cy, X0 + cx + 80, Y0 + cy + 50))
    for cx, cy in rng.uniform(0, 3000, size=(6, 2)):  # with a hole
        geoms.append(box(X0 + cx, Y0 + cy, X0 + cx + 150, Y0 + cy + 150).difference(
            box(X0 + cx + 50, Y0 + cy + 50, X0 + cx + 100, Y0 + cy + 100)))
    for cx, cy in rng.uniform(0, 3000, size=(4, 2)):
        geoms.append(MultiPolygon([box(X0 + cx, Y0 + cy, X0 + cx + 40, Y0 + cy + 40),
                                   box(X0 + cx + 90, Y0 + cy, X0 + cx + 130, Y0 + cy + 60)]))
    for cx, cy in rng.uniform(0, 3000, size=(6, 2)):
        geoms.append(LineString([(X0 + cx, Y0 + cy), (X0 + cx + 70, Y0 + cy + 20), (X0 + cx + 90, Y0 + cy + 100)]))
    for cx, cy in rng.uniform(0, 3000, size=(6, 2)):
        geoms.append(Point(X0 + cx, Y0 + cy))
    geoms.append(MultiPoint([(X0 + 100, Y0 + 2900), (X0 + 160, Y0 + 2950)]))
    geoms.append(Point(X0 + 1500, Y0 + 1500).buffer(600))  # big: GEOS path
    geoms.append(Point(X0 + 400, Y0 + 2500).buffer(60, quad_segs=32))  # many vertices: GEOS path
    geoms.append(shapely.GeometryCollection([box(X0 + 2600, Y0 + 200, X0 + 2700, Y0 + 260),
                                             LineString([(X0 + 2600, Y0 + 300), (X0 + 2750, Y0 + 320)])]))
    ids = rng.permutation(len(geoms)) * 3 + 5  # feature ids out of row order
    return gpd.GeoDataFrame({"kind": ["z"] * len(geoms)}, geometry=geoms, crs=CRS, index=ids)


def _sites(zones: gpd.GeoDataFrame, seed: int) -> gpd.GeoDataFrame:
    rng = np.random.default_rng(seed)
    xy = [rng.uniform(-500, 3500, size=(500, 2)) + [X0, Y0]]
    coords = shapely.get_coordinates(zones.geometry.array)
    xy.append(coords[rng.choice(len(coords), 40)])  # on vertices
    boxes = zones.geometry.array[60:70]
    b = shapely.bounds(boxes)
    xy.append(np.c_[(b[:, 0] + b[:, 2]) / 2, b[:, 1]])  # on the middle of a box's bottom edge
    xy.append(np.array([[X0 + 20_000, Y0 + 20_000], [X0 - 5_000, Y0 + 1000]]))  # far outside the zones
    holes = shapely.bounds(zones.geometry.array[70:76])
    xy.append(np.c_[holes[:, 0] + 75, holes[:, 1] + 75])  # in the middle of a hole
    xy = np.concatenate(xy)
    return gpd.GeoDataFrame(geometry=shapely.points(xy), crs=CRS)


def _brute(sites, zones, setback):
    pts = np.asarray(sites.geometry.array)
    geoms = np.asarray(zones.geometry.array)
    ids = np.asarray(zones.index, dtype=np.int64)
    dist = shapely.distance(pts[:, None], geoms[None, :])
    if setback > 0:
        rejects = dist < setback
        key = np.where(rejects, dist, np.inf)
    else:
        rejects = shapely.intersects(pts[:, None], geoms[None, :])
        key = np.where(rejects, 0.0, np.inf)
    hit = rejects.any(axis=1)
    feature = np.full(len(pts), -1, dtype=np.int64)
    nearest = dist.min(axis=1)
    for i in np.flatnonzero(hit):
        best = np.flatnonzero(key[i] == key[i].min())
        feature[i] = ids[best].min()
        nearest[i] = key[i].min()
    return hit, feature, nearest


@pytest.mark.parametrize("setback", [0.0, 25.0, 80.0])
@pytest.mark.parametrize("seed", [1, 2])
def test_clearance_matches_brute_force_over_every_zone_kind(setback, seed):
    zones = _zones(seed)
    sites = _sites(zones, seed + 10)
    hit, feature, nearest = _brute(sites, zones, setback)
    assert 0 < hit.sum() < len(hit)
    _, record = screen_sites(sites, exclude=[Exclusion(zones, setback_m=setback, name="zones")], threads=1)
    assert np.array_equal(record.verdict == "excluded", hit)
    assert np.array_equal(record.feature, feature)
    # the same value GEOS gives, not merely close to it
    np.testing.assert_array_equal(record.nearest_exclusion_m, nearest)


def test_clearance_of_parcels_and_multipoints_matches_brute_force():
    zones = _zones(3)
    rng = np.random.default_rng(4)
    xy = rng.uniform(0, 3000, size=(80, 2)) + [X0, Y0]
    geoms = list(shapely.box(xy[:, 0], xy[:, 1], xy[:, 0] + 30, xy[:, 1] + 20)) + [
        MultiPoint([(x, y), (x + 40, y + 10)]) for x, y in xy[:20]
    ]
    sites = gpd.GeoDataFrame(geometry=geoms, crs=CRS)
    hit, feature, nearest = _brute(sites, zones, 30.0)
    _, record = screen_sites(sites, exclude=[Exclusion(zones, setback_m=30.0, name="zones")], threads=1)
    assert np.array_equal(record.verdict == "excluded", hit)
    assert np.array_equal(record.feature, feature)
    np.testing.assert_array_equal(record.nearest_exclusion_m, nearest)


def test_threads_and_chunks_do_not_change_the_result(monkeypatch):
    zones = _zones(5)
    sites = _sites(zones, 6)
    rule = [Exclusion(zones, setback_m=40.0, name="zones")]
    _, serial = screen_sites(sites, exclude=rule, threads=1)
    monkeypatch.setattr(clearance, "_CHUNK", 37)  # many small tasks, handed out to the threads in any order
    monkeypatch.setattr(clearance, "_GRID_CHUNK", 37)
    for threads in (1, 2, 3):
        _, threaded = screen_sites(sites, exclude=rule, threads=threads)
        for field in ("verdict", "rule", "layer", "feature", "site_index"):
            assert np.array_equal(getattr(threaded, field), getattr(serial, field)), (threads, field)
        np.testing.assert_array_equal(threaded.nearest_exclusion_m, serial.nearest_exclusion_m)


@pytest.mark.parametrize("value", [0, -1, 1.5, "2", True])
def test_threads_must_be_a_whole_number(value):
    from geocover.errors import ParameterError

    zones = _zones(7)
    with pytest.raises(ParameterError, match="threads"):
        screen_sites(_sites(zones, 8), exclude=[Exclusion(zones, setback_m=10)], threads=value)


def test_sparse_zones_where_the_nearest_is_beyond_the_cells_searched_first():
    # few small zones over a wide area: some sites have a zone in the cells around them but a nearer one
    # just beyond (30 such sites in this layout), which the search must still find
    rng = np.random.default_rng(14)
    centres = rng.uniform(0, 4000, size=(40, 2)) + [X0, Y0]
    zones = gpd.GeoDataFrame(
        geometry=shapely.buffer(shapely.points(centres), rng.uniform(5, 30, size=40), quad_segs=2), crs=CRS
    )
    sites = gpd.GeoDataFrame(geometry=shapely.points(rng.uniform(-200, 4200, size=(3000, 2)) + [X0, Y0]), crs=CRS)
    hit, feature, nearest = _brute(sites, zones, 10.0)
    _, record = screen_sites(sites, exclude=[Exclusion(zones, setback_m=10.0, name="zones")], threads=1)
    assert np.array_equal(record.verdict == "excluded", hit)
    assert np.array_equal(record.feature, feature)
    np.testing.assert_array_equal(record.nearest_exclusion_m, nearest)


@pytest.mark.parametrize("threads", [1, 2])
def test_errors_come_in_the_same_order_with_threads(threads):
    # with threads the zone layers are read before the candidates are checked; their errors must still
    # come after the candidates' own, as they do when each layer is read where it is used
    from geocover.errors import ParameterError

    zones = _zones(9)
    sites = _sites(zones, 10)
    bad_filter = Exclusion(zones, setback_m=10, where="depth_m >= 1")  # no such field
    with pytest.raises(ParameterError, match="cost_field"):
        screen_sites(sites, exclude=[bad_filter], cost_field="price", threads=threads)
    with pytest.raises(ParameterError, match="depth_m"):
        screen_sites(sites, exclude=[bad_filter], threads=threads)


def test_ring_candidates_are_the_wider_cells_less_the_inner_ones():
    # the zones in the ring of cells ``reach`` away, with sites inside and outside the grid's extent
    rng = np.random.default_rng(3)
    zones = shapely.buffer(shapely.points(rng.uniform(0, 5000, (300, 2))), 30)
    grid = clearance.ZoneGrid.build(zones, 10.0)
    q = np.r_[rng.uniform(0, 5000, (400, 2)), rng.uniform(-2000, 7000, (200, 2))]
    for reach in (2, 3, 4):
        s1, r1, _, e1 = grid.candidates(q[:, 0], q[:, 1], reach)
        s0, r0, _, _ = grid.candidates(q[:, 0], q[:, 1], reach - 1)
        s2, r2, _, e2 = grid.candidates(q[:, 0], q[:, 1], reach, ring=True)
        ring = list(zip(s2.tolist(), r2.tolist()))
        assert len(ring) == len(set(ring))
        assert set(ring) == set(zip(s1.tolist(), r1.tolist())) - set(zip(s0.tolist(), r0.tolist()))
        assert len(ring) > 0 and np.array_equal(e1, e2)


def test_the_zone_grid_is_the_same_built_in_small_blocks(monkeypatch):
    # the grid is built in blocks of vertices; blocks of a few vertices give the same arrays
    zones = np.asarray(_zones(4).geometry.array)
    whole = clearance.ZoneGrid.build(zones, 25.0)
    monkeypatch.setattr(clearance, "_BLOCK", 7)
    parts = clearance.ZoneGrid.build(zones, 25.0)
    for name in ("run_x", "run_y", "centre", "polygonal", "zone", "cell_start", "other"):
        assert np.array_equal(getattr(whole, name), getattr(parts, name), equal_nan=True), name
