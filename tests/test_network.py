"""Road travel-time coverage: checked against networkx's Dijkstra and closed-form cases."""

from __future__ import annotations

import logging
import os
import time

import geopandas as gpd
import networkx as nx
import numpy as np
import pytest
from shapely import LineString

from geocover.errors import CRSError, InputError, LayerError, ParameterError
from geocover.network import build_network, reach_network
from geocover.values import Demand, Metric, Sites

UTM = "EPSG:32633"


def _roads(lines, crs=UTM, **cols):
    return gpd.GeoDataFrame(cols, geometry=[LineString(c) for c in lines], crs=crs)


def _dense(reach):
    return reach.matrix.toarray(), reach.pattern.toarray().astype(bool)


# ----------------------------------------------------------------- networkx oracle


def _random_grid(rng, size=7, spacing=100.0):
    """Jittered grid roads: one feature per street piece, random speeds and directions, some bends."""
    pts = {(i, j): (i * spacing + rng.uniform(-15, 15), j * spacing + rng.uniform(-15, 15)) for i in range(size) for j in range(size)}
    lines, speeds, ways = [], [], []
    for (i, j), p in pts.items():
        for q in ((i + 1, j), (i, j + 1)):
            if q not in pts or rng.random() < 0.15:
                continue
            a, b = p, pts[q]
            if rng.random() < 0.3:  # a bend: an interior shape vertex
                mid = ((a[0] + b[0]) / 2 + rng.uniform(-20, 20), (a[1] + b[1]) / 2 + rng.uniform(-20, 20))
                coords = [a, mid, b]
            else:
                coords = [a, b]
            lines.append(coords)
            speeds.append(float(rng.choice([20.0, 30.0, 50.0, 70.0])))
            ways.append(str(rng.choice(["no", "no", "no", "yes", "-1"])))
    return _roads(lines, kmh=speeds, oneway=ways)


def _nearest_segment(segs, p):
    a, b = segs[:, 0], segs[:, 1]
    ab = b - a
    t = np.clip(np.einsum("ij,ij->i", p - a, ab) / np.einsum("ij,ij->i", ab, ab), 0, 1)
    proj = a + t[:, None] * ab
    d = np.hypot(*(p - proj).T)
    k = int(np.argmin(d))
    return k, float(t[k]), float(d[k])


def _oracle(roads, demand_xy, site_xy, limit, v_off_kmh, max_snap, penalty):
    """Every (demand, site) time by networkx Dijkstra on the road graph with the points spliced in."""
    segs, seg_speed, seg_way = [], [], []
    for geom, kmh, way in zip(roads.geometry, roads["kmh"], roads["oneway"]):
        c = np.asarray(geom.coords)
        for k in range(len(c) - 1):
            segs.append(c[k : k + 2])
            seg_speed.append(kmh / 3.6)
            seg_way.append({"no": 0, "yes": 1, "-1": -1}[way])
    segs = np.array(segs)
    nbrs = {}
    for s in segs:
        a, b = tuple(s[0]), tuple(s[1])
        nbrs.setdefault(a, set()).add(b)
        nbrs.setdefault(b, set()).add(a)
    crossing = {node for node, ns in nbrs.items() if len(ns) >= 3}
    v_off = v_off_kmh / 3.6
    spliced = {}  # segment -> list of (t, node name)
    off = {}
    for kind, xy in (("d", demand_xy), ("s", site_xy)):
        for i, p in enumerate(xy):
            k, t, d = _nearest_segment(segs, p)
            if d <= max_snap:
                spliced.setdefault(k, []).append((t, (kind, i)))
                off[(kind, i)] = d / v_off
    # the penalty is a cost of passing through a crossing: every road node is split into an arrival node
    # ("in", X) and a departure node ("out", X) joined by an edge of the penalty; a point standing on a node
    # (t = 0 or 1) is reached from its arrival node and leaves from its departure node, so starting or ending
    # at a node is not passing through it
    g = nx.DiGraph()

    def add(u, v, w):
        if not g.has_edge(u, v) or g[u][v]["weight"] > w:
            g.add_edge(u, v, weight=w)

    def depart(n):
        return ("out", n) if n in nbrs else n

    def arrive(n):
        return ("in", n) if n in nbrs else n

    for node in nbrs:
        add(("in", node), ("out", node), penalty if node in crossing else 0.0)
    for k, s in enumerate(segs):
        length = float(np.hypot(*(s[1] - s[0])))
        inside = [p for p in spliced.get(k, []) if 0.0 < p[0] < 1.0]
        chain = [(0.0, tuple(s[0]))] + sorted(inside, key=lambda x: x[0]) + [(1.0, tuple(s[1]))]
        for (t0, n0), (t1, n1) in zip(chain[:-1], chain[1:]):
            w = (t1 - t0) * length / seg_speed[k]
            if seg_way[k] >= 0:
                add(depart(n0), arrive(n1), w)
            if seg_way[k] <= 0:
                add(depart(n1), arrive(n0), w)
    for k, points in spliced.items():  # a point snapped onto an end node stands on that node
        u, v = tuple(segs[k][0]), tuple(segs[k][1])
        for t, name in points:
            for end, at in ((u, 0.0), (v, 1.0)):
                if t == at and name[0] == "d":  # demand is only arrived at, never driven through
                    add(("in", end), name, 0.0)
                elif t == at:  # a site leaves from the node (or meets demand standing on it)
                    add(name, ("out", end), 0.0)
                    add(name, ("in", end), 0.0)
    expected = {}
    for j in range(len(site_xy)):
        src = ("s", j)
        if src not in off or off[src] > limit:
            continue
        times = nx.single_source_dijkstra_path_length(g, src, cutoff=limit - off[src], weight="weight")
        for i in range(len(demand_xy)):
            node = ("d", i)
            if node in times and off[src] + times[node] + off[node] <= limit:
                expected[(i, j)] = off[src] + times[node] + off[node]
    return expected


@pytest.mark.parametrize("seed, penalty", [(0, 0.0), (1, 0.0), (2, 7.0), (3, 12.0)])
def test_every_pair_matches_networkx_dijkstra(seed, penalty):
    rng = np.random.default_rng(seed)
    roads = _random_grid(rng)
    demand_xy = rng.uniform(-60, 660, (70, 2))
    site_xy = rng.uniform(0, 600, (6, 2))
    limit, v_off, snap = 75.0, 5.0, 40.0
    reach = reach_network(
        Demand(demand_xy, np.ones(len(demand_xy)), crs=UTM), Sites(site_xy, crs=UTM), roads, limit,
        speed_field="kmh", oneway_field="oneway", offroad_speed_kmh=v_off, max_snap_m=snap, turn_penalty_s=penalty,
    )
    expected = _oracle(roads, demand_xy, site_xy, limit, v_off, snap, penalty)  # networkx Dijkstra
    times, covered = _dense(reach)
    got = {(int(i), int(j)) for i, j in zip(*np.nonzero(covered))}
    assert got == set(expected)
    assert len(expected) > 10 and len(expected) < covered.size  # both covered and uncovered pairs occur
    for (i, j), t in expected.items():
        assert times[i, j] == pytest.approx(t, abs=1e-9)
    assert reach.rule.metric == Metric.NETWORK and reach.rule.unit == "s"


# ----------------------------------------------------------------- closed form


@pytest.mark.parametrize("vertices", [2, 11])
def test_straight_road_closed_form(vertices):
    # constant speed 36 km/h = 10 m/s on a 10 km road along y = 0, drawn as one segment or as 10
    xs = np.linspace(0.0, 10_000.0, vertices)
    roads = _roads([[(x, 0.0) for x in xs]], kmh=[36.0])
    rng = np.random.default_rng(9)
    dem = np.column_stack([rng.uniform(-200, 10_200, 400), rng.uniform(-300, 300, 400)])
    site = np.array([[2000.0, 30.0], [7000.0, -10.0]])
    limit, v_off = 300.0, 5.0 / 3.6
    reach = reach_network(Demand(dem, np.ones(400), crs=UTM), Sites(site, crs=UTM), roads, limit,
                          speed_field="kmh", offroad_speed_kmh=5.0, max_snap_m=1000.0)
    times, covered = _dense(reach)
    # closed form: off-road legs at walking speed to the nearest road point, the rest along the road at 10 m/s
    along = np.clip(dem[:, 0], 0, 10_000)[:, None] - site[None, :, 0]
    off_d = np.hypot(dem[:, 0] - np.clip(dem[:, 0], 0, 10_000), dem[:, 1])[:, None]
    expect = np.abs(site[None, :, 1]) / v_off + np.abs(along) / 10.0 + off_d / v_off
    np.testing.assert_array_equal(covered, expect <= limit)
    np.testing.assert_allclose(times[covered], expect[covered], rtol=0, atol=1e-9)
    assert covered.any() and (~covered).any()


def test_point_exactly_at_the_limit_is_covered():
    roads = _roads([[(0.0, 0.0), (10_000.0, 0.0)]], kmh=[36.0])
    d = Demand(np.array([[5000.0, 0.0], [5000.001, 0.0]]), np.ones(2), crs=UTM)
    s = Sites(np.array([[2000.0, 0.0]]), crs=UTM)
    reach = reach_network(d, s, roads, 300.0, speed_field="kmh")  # 3000 m at 10 m/s = 300 s exactly
    assert reach.coverable.tolist() == [True, False]
    assert reach.matrix.data.tolist() == [300.0]


def test_one_way_roads_are_honoured():
    roads = _roads([[(0.0, 0.0), (1000.0, 0.0)], [(0.0, 100.0), (1000.0, 100.0)]], kmh=[36.0, 36.0], way=["yes", "-1"])
    d = Demand(np.array([[800.0, 0.0], [200.0, 0.0], [800.0, 100.0], [200.0, 100.0]]), np.ones(4), crs=UTM)
    s = Sites(np.array([[500.0, 0.0], [500.0, 100.0]]), crs=UTM)
    r = reach_network(d, s, roads, 100.0, speed_field="kmh", oneway_field="way", max_snap_m=10.0)
    _, covered = _dense(r)
    assert covered.tolist() == [[True, False], [False, False], [False, False], [False, True]]
    two_way = reach_network(d, s, roads, 100.0, speed_field="kmh", max_snap_m=10.0)
    assert _dense(two_way)[1].tolist() == [[True, False], [True, False], [False, True], [False, True]]


def test_turn_penalty_at_intersections_only():
    # a cross of four arms meeting at the origin, and a bent road whose bend is a shape vertex
    arms = [[(0.0, 0.0), (-500.0, 0.0)], [(0.0, 0.0), (500.0, 0.0)], [(0.0, 0.0), (0.0, 500.0)], [(0.0, 0.0), (0.0, -500.0)]]
    bent = [[(2000.0, 0.0), (2300.0, 0.0), (2300.0, 300.0)]]
    roads = _roads(arms + bent, kmh=[36.0] * 5)
    d = Demand(np.array([[300.0, 0.0], [2300.0, 200.0]]), np.ones(2), crs=UTM)
    s = Sites(np.array([[-200.0, 0.0], [2100.0, 0.0]]), crs=UTM)
    r = reach_network(d, s, roads, 200.0, speed_field="kmh", turn_penalty_s=15.0, max_snap_m=5.0)
    times = r.matrix.toarray()
    assert times[0, 0] == pytest.approx(50.0 + 15.0)  # 500 m through the crossing + one penalty
    assert times[1, 1] == pytest.approx(40.0)  # 400 m round the bend, no penalty


def test_starting_or_ending_on_an_intersection_node_pays_no_penalty():
    # a cross of four 500 m arms at 10 m/s; site 0 and demand 0 stand on the crossing node (0, 0)
    arms = [[(0.0, 0.0), (-500.0, 0.0)], [(0.0, 0.0), (500.0, 0.0)], [(0.0, 0.0), (0.0, 500.0)], [(0.0, 0.0), (0.0, -500.0)]]
    roads = _roads(arms, kmh=[36.0] * 4, oneway=["no"] * 4)
    demand_xy = np.array([[0.0, 0.0], [0.0, 100.0], [200.0, 0.0]])
    site_xy = np.array([[0.0, 0.0], [-100.0, 0.0]])
    r = reach_network(Demand(demand_xy, np.ones(3), crs=UTM), Sites(site_xy, crs=UTM), roads, 200.0,
                      speed_field="kmh", oneway_field="oneway", turn_penalty_s=15.0, max_snap_m=5.0)
    times = r.matrix.toarray()
    # closed form: 10 m/s along the arms; 15 s only when a route passes through the crossing
    assert times[0, 0] == 0.0  # site and demand on the same node
    assert times[1, 0] == pytest.approx(10.0) and times[2, 0] == pytest.approx(20.0)  # starting on the node
    assert times[0, 1] == pytest.approx(10.0)  # ending on the node
    assert times[1, 1] == pytest.approx(10.0 + 15.0 + 10.0) and times[2, 1] == pytest.approx(10.0 + 15.0 + 20.0)
    expected = _oracle(roads, demand_xy, site_xy, 200.0, 5.0, 5.0, 15.0)  # networkx Dijkstra
    assert {(int(i), int(j)) for i, j in zip(*np.nonzero(r.pattern.toarray()))} == set(expected)
    for (i, j), t in expected.items():
        assert times[i, j] == pytest.approx(t, abs=1e-9)
    # the display polygon of site 0 within 45 s reaches 450 m up each arm (300 m if the penalty were charged)
    from geocover.network import network_service_areas

    poly = network_service_areas(r, [0], limit_s=45.0)[0]
    assert poly.intersection(LineString([(0.0, 0.0), (0.0, 500.0)])).length == pytest.approx(450.0, abs=1.0)


def test_unsnapped_points_and_disconnected_parts_are_reported(caplog):
    roads = _roads([[(0.0, 0.0), (1000.0, 0.0)], [(5000.0, 0.0), (6000.0, 0.0)]], kmh=[36.0, 36.0])
    d = Demand(np.array([[100.0, 0.0], [5500.0, 0.0], [3000.0, 3000.0]]), np.array([10.0, 20.0, 5.0]), crs=UTM)
    s = Sites(np.array([[0.0, 0.0], [9000.0, 9000.0]]), crs=UTM)
    with caplog.at_level(logging.WARNING, logger="geocover.network"):
        r = reach_network(d, s, roads, 600.0, speed_field="kmh", max_snap_m=200.0)
    assert r.notes["unsnapped_demand"].tolist() == [2]
    assert r.notes["unsnapped_sites"].tolist() == [1]
    assert r.notes["unsnapped_demand_weight"] == 5.0
    comps = r.notes["components"]
    assert comps["count"] == 2
    assert sorted(comps["demand_weight"].tolist()) == [10.0, 20.0]
    assert comps["weight_without_site"] == 20.0
    assert comps["demand_component"][2] == -1
    assert r.coverable.tolist() == [True, False, False]
    assert "disconnected" in caplog.text and "from every road" in caplog.text


def test_split_crossings():
    roads = _roads([[(-500.0, 0.0), (500.0, 0.0)], [(0.0, -500.0), (0.0, 500.0)]], kmh=[36.0, 36.0])
    d = Demand(np.array([[0.0, 300.0]]), [1.0], crs=UTM)
    s = Sites(np.array([[-400.0, 0.0]]), crs=UTM)
    plain = reach_network(d, s, roads, 200.0, speed_field="kmh", max_snap_m=5.0)
    assert plain.matrix.nnz == 0 and plain.notes["components"]["count"] == 2
    split = reach_network(d, s, roads, 200.0, speed_field="kmh", max_snap_m=5.0, split_crossings=True)
    assert split.matrix.toarray()[0, 0] == pytest.approx(70.0)  # 400 m + 300 m at 10 m/s


def test_road_classes_and_speed_table():
    roads = _roads([[(0.0, 0.0), (1000.0, 0.0)]], kind=["lane"])
    d = Demand(np.array([[900.0, 0.0]]), [1.0], crs=UTM)
    s = Sites(np.array([[0.0, 0.0]]), crs=UTM)
    with pytest.raises(LayerError, match="lane"):
        reach_network(d, s, roads, 100.0, class_field="kind")
    r = reach_network(d, s, roads, 100.0, class_field="kind", speed_table={"lane": 36})
    assert r.matrix.toarray()[0, 0] == pytest.approx(90.0)
    roads2 = _roads([[(0.0, 0.0), (1000.0, 0.0)]], kind=["residential"])  # default table: 30 km/h
    r2 = reach_network(d, s, roads2, 200.0, class_field="kind")
    assert r2.matrix.toarray()[0, 0] == pytest.approx(900.0 / (30.0 / 3.6))
    r3 = reach_network(d, s, roads2, 200.0, class_field="kind", speed_table={"residential": 45})
    assert r3.matrix.toarray()[0, 0] == pytest.approx(72.0)


def test_bad_inputs_name_the_field_or_parameter():
    roads = _roads([[(0.0, 0.0), (1000.0, 0.0)]], kmh=[0.0], way=["sideways"])
    d = Demand(np.array([[900.0, 0.0]]), [1.0], crs=UTM)
    s = Sites(np.array([[0.0, 0.0]]), crs=UTM)
    with pytest.raises(LayerError, match="'kmh'"):
        reach_network(d, s, roads, 100.0, speed_field="kmh")
    with pytest.raises(LayerError, match="fields are"):
        reach_network(d, s, roads, 100.0, speed_field="speed")
    good = _roads([[(0.0, 0.0), (1000.0, 0.0)]], kmh=[30.0], way=["sideways"])
    with pytest.raises(LayerError, match="'way'"):
        reach_network(d, s, good, 100.0, speed_field="kmh", oneway_field="way")
    with pytest.raises(ParameterError) as err:
        reach_network(d, s, good, 0.0, speed_field="kmh")
    assert err.value.param == "limit"
    with pytest.raises(ParameterError):
        reach_network(d, s, good, 10.0)  # neither speed_field nor class_field
    with pytest.raises(ParameterError) as err:
        reach_network(d, s, "no/such/roads.gpkg", 100.0, speed_field="kmh", turn_penalty_s="long")  # before any read
    assert err.value.param == "turn_penalty_s"
    with pytest.raises(InputError, match="sites: expected geocover Sites"):
        reach_network(d, s.xy, good, 10.0, speed_field="kmh")
    assert reach_network(d, s, good, 200.0, speed_field="kmh", max_snap_m=np.int64(5)).matrix.nnz == 1  # numpy numbers are numbers
    with pytest.raises(CRSError):
        reach_network(Demand(d.xy, [1.0], crs="EPSG:4326"), Sites(s.xy, crs="EPSG:4326"), good, 10.0, speed_field="kmh")
    points = gpd.GeoDataFrame({"kmh": [1.0]}, geometry=gpd.points_from_xy([0.0], [0.0]), crs=UTM)
    with pytest.raises(LayerError, match="lines"):
        reach_network(d, s, points, 10.0, speed_field="kmh")


def test_roads_from_a_geopackage_in_another_crs(tmp_path):
    roads = _roads([[(0.0, 0.0), (1000.0, 0.0)]], kmh=[36.0]).to_crs("EPSG:4326")
    path = tmp_path / "roads.gpkg"
    roads.to_file(path, layer="streets", driver="GPKG")
    d = Demand(np.array([[900.0, 0.0]]), [1.0], crs=UTM)
    s = Sites(np.array([[0.0, 0.0]]), crs=UTM)
    r = reach_network(d, s, f"{path}:streets", 100.0, speed_field="kmh", max_snap_m=5.0)
    assert r.matrix.toarray()[0, 0] == pytest.approx(90.0, abs=1e-3)


def test_graph_keeps_the_faster_of_parallel_roads():
    roads = _roads([[(0.0, 0.0), (1000.0, 0.0)], [(0.0, 0.0), (1000.0, 0.0)]], kmh=[36.0, 72.0])
    net = build_network(roads, speed_field="kmh")
    assert net.graph.nnz == 2 and net.graph.data.tolist() == [50.0, 50.0]


def test_point_snapped_onto_the_end_of_a_one_way_road_stands_on_its_node():
    # the demand's nearest road point is the node (1000, 0), shared by a two-way road and a short one-way
    # road drawn towards that node; whichever segment it snaps to, it is at the node
    roads = _roads([[(0.0, 0.0), (1000.0, 0.0)], [(1000.0, 100.0), (1000.0, 0.0)]], kmh=[36.0, 36.0], way=["no", "yes"])
    d = Demand(np.array([[1000.0, -50.0]]), [1.0], crs=UTM)
    s = Sites(np.array([[0.0, 0.0]]), crs=UTM)
    r = reach_network(d, s, roads, 200.0, speed_field="kmh", oneway_field="way")
    assert r.notes["demand_snap"].segment[0] == 1 and r.notes["demand_snap"].t[0] == 1.0  # snapped to the one-way road
    assert r.matrix.toarray()[0, 0] == pytest.approx(100.0 + 50.0 / (5.0 / 3.6))


# ----------------------------------------------------------------- searches shared by processes


@pytest.mark.parametrize("workers", [2, 3])
def test_searches_in_several_processes_give_the_same_pairs(workers):
    rng = np.random.default_rng(11)
    roads = _random_grid(rng, size=9)
    demand_xy = rng.uniform(-60, 860, (150, 2))
    site_xy = rng.uniform(0, 800, (13, 2))
    args = (Demand(demand_xy, np.ones(len(demand_xy)), crs=UTM), Sites(site_xy, crs=UTM), roads, 90.0)
    kw = dict(speed_field="kmh", oneway_field="oneway", max_snap_m=60.0, turn_penalty_s=5.0)
    one = reach_network(*args, workers=1, **kw).matrix
    many = reach_network(*args, workers=workers, **kw).matrix
    assert one.nnz > 50 and one.nnz < one.shape[0] * one.shape[1]
    assert (one.indptr == many.indptr).all() and (one.indices == many.indices).all()
    assert (one.data == many.data).all()  # the same floating-point sums, not merely close
    # and both are the networkx answer
    expected = _oracle(roads, demand_xy, site_xy, 90.0, 5.0, 60.0, 5.0)  # networkx Dijkstra
    got = {(int(i), int(j)): float(v) for i, j, v in zip(*many.nonzero(), many.data)}
    assert got.keys() == expected.keys()
    assert all(got[k] == pytest.approx(expected[k], abs=1e-9) for k in expected)


@pytest.mark.parametrize("fail_after", [0, 2])  # at its first search, or after it has taken sites from the parent's share
def test_a_failed_search_process_is_redone_here(monkeypatch, caplog, fail_after):
    import geocover.network as nw

    rng = np.random.default_rng(5)
    roads = _random_grid(rng, size=8)
    demand_xy = rng.uniform(0, 700, (80, 2))
    site_xy = rng.uniform(0, 700, (8, 2))
    args = (Demand(demand_xy, np.ones(len(demand_xy)), crs=UTM), Sites(site_xy, crs=UTM), roads, 80.0)
    want = reach_network(*args, speed_field="kmh", workers=1).matrix
    parent = os.getpid()
    real_reach = nw._SiteSearch.reach

    done = []

    def reach_failing_in_children(self, i):
        if os.getpid() != parent:
            done.append(i)
            if len(done) > fail_after:
                raise MemoryError("simulated")
        return real_reach(self, i)

    monkeypatch.setattr(nw._SiteSearch, "reach", reach_failing_in_children)
    real_build = nw._DemandIndex.build.__func__

    def slow_build(cls, *a):  # the child gets to its failure before this process takes any site
        time.sleep(0.3)
        return real_build(cls, *a)

    monkeypatch.setattr(nw._DemandIndex, "build", classmethod(slow_build))
    with caplog.at_level(logging.WARNING, logger="geocover.network"):
        got = reach_network(*args, speed_field="kmh", workers=2).matrix
    assert "search process failed" in caplog.text and "MemoryError" in caplog.text
    assert (got != want).nnz == 0 and got.nnz == want.nnz


@pytest.mark.parametrize("workers", [1, 2])
def test_no_search_process_outlives_a_failed_or_empty_demand(monkeypatch, workers):
    import multiprocessing

    import geocover.network as nw

    rng = np.random.default_rng(2)
    roads = _random_grid(rng, size=6)
    sites = Sites(rng.uniform(0, 500, (6, 2)), crs=UTM)
    # the children start searching before the demand is snapped; with none snapped they are stopped
    far = Demand(np.array([[1e5, 1e5], [-1e5, 0.0]]), np.ones(2), crs=UTM)
    r = reach_network(far, sites, roads, 80.0, speed_field="kmh", workers=workers)
    assert r.matrix.nnz == 0 and len(r.notes["unsnapped_demand"]) == 2
    assert not multiprocessing.active_children()

    def broken(*args, **kwargs):
        raise MemoryError("simulated")

    monkeypatch.setattr(nw._DemandIndex, "build", broken)
    near = Demand(rng.uniform(0, 500, (20, 2)), np.ones(20), crs=UTM)
    with pytest.raises(MemoryError):
        reach_network(near, sites, roads, 80.0, speed_field="kmh", workers=workers)
    assert not multiprocessing.active_children()


def test_workers_must_be_a_whole_number():
    roads = _roads([[(0.0, 0.0), (1000.0, 0.0)]], kmh=[36.0])
    d = Demand(np.array([[600.0, 0.0]]), [1.0], crs=UTM)
    s = Sites(np.array([[0.0, 0.0]]), crs=UTM)
    for bad in (0, -1, 1.5, True, "2"):
        with pytest.raises(ParameterError) as err:
            reach_network(d, s, "no/such/roads.gpkg", 60.0, speed_field="kmh", workers=bad)  # before any read
        assert err.value.param == "workers"
    assert reach_network(d, s, roads, 60.0, speed_field="kmh", workers=4).matrix.nnz == 1  # more workers than sites


# ----------------------------------------------------------------- memory budget


@pytest.mark.parametrize("workers", [1, 2])
def test_a_relation_over_the_memory_budget_is_refused_once_the_demand_is_snapped(workers):
    import multiprocessing

    import geocover.network as nw

    rng = np.random.default_rng(8)
    roads = _random_grid(rng, size=8)
    demand = Demand(rng.uniform(0, 700, (400, 2)), np.ones(400), crs=UTM)
    sites = Sites(rng.uniform(0, 700, (40, 2)), crs=UTM)
    full = reach_network(demand, sites, roads, 80.0, speed_field="kmh", workers=1)
    assert full.matrix.nnz > 1000
    # 40 sites, 32 of them searched for the estimate: within 20 % of the pairs found (0.4 % here)
    net = full.notes["network"]
    est = nw._estimate_pairs(_search_of(nw, net, full, demand, 80.0))
    assert 0.8 * full.matrix.nnz < est < 1.2 * full.matrix.nnz
    need_gb = est * nw.NETWORK_BYTES_PER_PAIR / 1e9
    with pytest.raises(InputError, match=r"network coverage: about [\d,]+ demand-site pairs .* memory budget"):
        reach_network(demand, sites, roads, 80.0, speed_field="kmh", workers=workers, memory_budget_gb=need_gb / 2)
    assert not multiprocessing.active_children()
    ok = reach_network(demand, sites, roads, 80.0, speed_field="kmh", workers=workers, memory_budget_gb=need_gb * 2)
    assert (ok.matrix != full.matrix).nnz == 0


def test_the_pair_estimate_is_exact_for_32_sites_or_fewer():
    import geocover.network as nw

    rng = np.random.default_rng(9)
    roads = _random_grid(rng, size=7)
    demand = Demand(rng.uniform(0, 600, (200, 2)), np.ones(200), crs=UTM)
    sites = Sites(rng.uniform(0, 600, (12, 2)), crs=UTM)
    r = reach_network(demand, sites, roads, 70.0, speed_field="kmh", workers=1)
    search = _search_of(nw, r.notes["network"], r, demand, 70.0)
    pairs, _, _, _ = nw._network_pairs(
        r.notes["network"], r.notes["site_snap"], r.notes["site_snap"].distance / (5.0 / 3.6), 70.0,
        lambda: (r.notes["demand_snap"], r.notes["demand_snap"].distance / (5.0 / 3.6)), len(demand), 1,
    )
    assert nw._estimate_pairs(search) == len(pairs[0])


def test_memory_budget_must_be_a_positive_number():
    d = Demand(np.array([[600.0, 0.0]]), [1.0], crs=UTM)
    s = Sites(np.array([[0.0, 0.0]]), crs=UTM)
    for bad in (0, -1.0, float("nan"), "1", True):
        with pytest.raises(ParameterError) as err:
            reach_network(d, s, "no/such/roads.gpkg", 60.0, speed_field="kmh", memory_budget_gb=bad)  # before any read
        assert err.value.param == "memory_budget_gb"


def _search_of(nw, net, reach, demand, limit):
    """The sites' search with its demand, as reach_network makes it (off-road at 5 km/h)."""
    v = 5.0 / 3.6
    ssnap, dsnap = reach.notes["site_snap"], reach.notes["demand_snap"]
    s_off = ssnap.distance / v
    s_idx = np.flatnonzero(ssnap.snapped & (s_off <= limit))
    search = nw._SiteSearch(nw._source_graph(net, ssnap, s_idx), net.n_nodes, limit, limit - s_off[s_idx],
                            nw._at_node(net, ssnap, s_idx), s_off[s_idx], np.int32, len(demand))
    return search.with_demand(nw._DemandIndex.build(net, dsnap, dsnap.distance / v, np.int32))


def test_pairs_cross_between_processes_whole_in_many_and_short_transfers():
    import geocover.network as nw

    if not hasattr(os, "memfd_create"):
        pytest.skip("memfd_create is Linux only")
    rng = np.random.default_rng(4)
    arrays = [rng.integers(0, 1000, int(k)).astype(np.int32) for k in rng.integers(0, 9, 1100)]  # > _IOV_MAX pieces
    fd = os.memfd_create("test", os.MFD_CLOEXEC)
    try:
        end = nw._pwrite_all(fd, arrays, 1 << 30)
        assert end == (1 << 30) + sum(a.nbytes for a in arrays)
        back = [np.empty_like(a) for a in arrays]
        assert nw._pread_into(fd, back, 1 << 30) == end
        assert all((a == b).all() for a, b in zip(arrays, back))

        def short(fd_, views, offset):  # at most 7 bytes a call, as a slow pipe or a signal could make it
            return os.preadv(fd_, [views[0][:7]], offset)

        again = [np.empty_like(a) for a in arrays]
        assert nw._vectored(short, fd, again, 1 << 30) == end
        assert all((a == b).all() for a, b in zip(arrays, again))
        with pytest.raises(EOFError):
            nw._pread_into(fd, [np.empty(4, np.int32)], end)  # nothing there
    finally:
        os.close(fd)
