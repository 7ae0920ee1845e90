"""Rebuild the invented "Tarrow Isle" sample scenario in this directory.

Everything here is made up: the island, its towns, villages, river, reserve,
roads, stations and parcels do not exist.  The island sits in open Atlantic
water in EPSG:32626 (WGS 84 / UTM zone 26N) so that nothing overlays a real
place.

Run from anywhere::

    python sample_layers/build_sample.py            # writes next to this file
    python sample_layers/build_sample.py --out DIR  # writes somewhere else

The script is deterministic: one seeded ``numpy.random.Generator`` drives all
randomness and every random draw happens in a fixed order.  It deliberately
does not import geocover, so the sample data stays an outside fixture.

Files written (see README.md in this directory for the fields):

* ``tarrow_population_100m.tif``   float32 people per 100 m cell, nodata -1 (sea)
* ``tarrow_land_use_100m.tif``     uint8 land-use class, nodata 0 (sea)
* ``tarrow_land_use_classes.csv``  code,name of the land-use classes
* ``tarrow.gpkg``                  study_area, census_areas, river, flood_zones,
  protected_land, roads, existing_stations, candidate_parcels
"""

from __future__ import annotations

import argparse
import csv
import os
import sys
from pathlib import Path

import numpy as np

# GeoPackage writers stamp "last_change" with the current time; this GDAL
# configuration option pins it so two runs give byte-identical files.  It must
# be set before GDAL writes anything (it is read when a layer is created).
FIXED_TIMESTAMP = "2026-01-01T00:00:00Z"
os.environ["OGR_CURRENT_DATE"] = FIXED_TIMESTAMP

import geopandas as gpd  # noqa: E402
import pyproj  # noqa: E402
import rasterio  # noqa: E402
import shapely  # noqa: E402
from rasterio.features import rasterize, shapes  # noqa: E402
from rasterio.transform import from_origin  # noqa: E402
from shapely.geometry import LineString, Point, Polygon, shape  # noqa: E402
from shapely.ops import substring  # noqa: E402

SEED = 20261201
CRS = "EPSG:32626"
X0, Y0 = 480_000.0, 4_960_000.0  # lower-left corner of the study area
CELL = 100.0
NCOLS, NROWS = 400, 300  # 40 km x 30 km
X1, Y1 = X0 + NCOLS * CELL, Y0 + NROWS * CELL
TRANSFORM = from_origin(X0, Y1, CELL, CELL)
CENTRE = np.array([X0 + 20_000.0, Y0 + 15_000.0])
TARGET_TOTAL = 251_400.0  # people on the island (about 250,000)

ISLAND_NAME = "Tarrow Isle"
RIVER_NAME = "River Sarrowen"
TRIBUTARY_NAME = "Dransick Burn"
# name, population, fraction of the way from island centre to coast, bearing (deg, math convention)
TOWNS = [
    ("Port Sarrowen", 60_000.0),  # at the river mouth, placed from the river below
    ("Varrowby", 45_000.0, 0.58, 192.0),
    ("Fenlisk", 30_000.0, 0.55, 38.0),
]
VILLAGES = [
    ("Colmby Cross", 4_200.0),
    ("Dransick", 3_100.0),
    ("Ardrellin", 2_600.0),
    ("Meskett", 4_800.0),
    ("Ruddowe", 1_400.0),
    ("Sennabrook", 2_200.0),
    ("Tolvary", 1_800.0),
    ("Yarlish", 3_500.0),
]
RESERVE_NAME = "Skarrow Moor"
WETLAND_NAME = "Sarrowen Fens"
LAKE_NAME = "Skarrow Tarn"  # only appears as water in the land-use grid

LAND_USE_CLASSES = [
    (1, "residential"),
    (2, "commercial"),
    (3, "industrial"),
    (4, "agriculture"),
    (5, "forest"),
    (6, "wetland"),
    (7, "water"),
]
LAND_USE_COLOURS = {  # our own palette, only for viewing in a desktop GIS
    1: (230, 170, 150, 255),
    2: (200, 80, 90, 255),
    3: (150, 130, 170, 255),
    4: (235, 225, 160, 255),
    5: (90, 150, 90, 255),
    6: (120, 190, 190, 255),
    7: (70, 120, 200, 255),
}
ROAD_SPEED_KMH = {"arterial": 80.0, "collector": 60.0, "local": 40.0}
TRACK_SPEED_KMH = (30.0, 40.0)  # rural tracks: spurs to farms, through tracks between roads
RURAL_REACH_M = 500.0  # rural roads are added until ...
RURAL_TARGET_SHARE = 0.975  # ... this share of the people live within RURAL_REACH_M of a road
TOWN_ARTERIAL_SPEED_KMH = 50.0  # arterial stretches inside a town


# ---------------------------------------------------------------- helpers


def unit(v: np.ndarray) -> np.ndarray:
    return v / np.hypot(*v)


def perp(v: np.ndarray) -> np.ndarray:
    return np.array([-v[1], v[0]])


def blob(rng, cx, cy, rx, ry, rot=0.0, rough=0.08, kmax=6, n=360) -> Polygon:
    """A smooth star-shaped polygon: an ellipse with a few random harmonics."""
    t = np.linspace(0.0, 2.0 * np.pi, n, endpoint=False)
    r = np.ones(n)
    for k in range(2, kmax + 1):
        amp = rng.normal(0.0, rough / k**0.8)
        phase = rng.uniform(0.0, 2.0 * np.pi)
        r += amp * np.cos(k * t + phase)
    r = np.clip(r, 0.45, None)
    x, y = rx * r * np.cos(t), ry * r * np.sin(t)
    c, s = np.cos(rot), np.sin(rot)
    return Polygon(np.column_stack([cx + c * x - s * y, cy + s * x + c * y]))


def chaikin(points: np.ndarray, iterations: int = 4) -> np.ndarray:
    """Corner-cutting smoothing of an open polyline, keeping both ends."""
    p = np.asarray(points, dtype=float)
    for _ in range(iterations):
        q = 0.75 * p[:-1] + 0.25 * p[1:]
        r = 0.25 * p[:-1] + 0.75 * p[1:]
        mid = np.empty((2 * len(q), 2))
        mid[0::2], mid[1::2] = q, r
        p = np.vstack([p[:1], mid, p[-1:]])
    return p


def curved_path(rng, a, b, bend_sd=0.12, n_ctrl=4, wiggle_sd=0.03, step=250.0) -> LineString:
    """A gently curving road or stream from a to b (both ends kept exactly)."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    d = b - a
    length = np.hypot(*d)
    n = perp(unit(d))
    bend = rng.normal(0.0, bend_sd) * length
    ts = np.linspace(0.0, 1.0, n_ctrl + 2)
    ctrl = [a + t * d + n * (bend * 4 * t * (1 - t) + rng.normal(0.0, wiggle_sd) * length * (0 < t < 1))
            for t in ts]
    pts = chaikin(np.array(ctrl), 3)
    pts[0], pts[-1] = a, b
    line = LineString(pts)
    return shapely.segmentize(line, step)


def coast_point(island: Polygon, bearing_deg: float) -> np.ndarray:
    """Where a ray from the island centre at this bearing leaves the island."""
    t = np.radians(bearing_deg)
    far = CENTRE + 60_000.0 * np.array([np.cos(t), np.sin(t)])
    hit = island.exterior.intersection(LineString([CENTRE, far]))
    pts = np.array([(g.x, g.y) for g in shapely.get_parts(hit)])
    return pts[np.argmin(np.hypot(*(pts - CENTRE).T))]


def along(island, bearing_deg, frac) -> np.ndarray:
    return CENTRE + frac * (coast_point(island, bearing_deg) - CENTRE)


def blur(a: np.ndarray, sigma: float) -> np.ndarray:
    """Separable Gaussian blur with reflected edges (numpy only)."""
    radius = int(3 * sigma) + 1
    x = np.arange(-radius, radius + 1)
    k = np.exp(-0.5 * (x / sigma) ** 2)
    k /= k.sum()
    out = np.pad(a, radius, mode="reflect")
    out = np.apply_along_axis(lambda r: np.convolve(r, k, mode="valid"), 1, out)
    out = np.apply_along_axis(lambda c: np.convolve(c, k, mode="valid"), 0, out)
    return out


def noise(rng, sigma: float) -> np.ndarray:
    """Smooth noise field on the grid, scaled to unit standard deviation."""
    f = blur(rng.normal(size=(NROWS, NCOLS)), sigma)
    return (f - f.mean()) / f.std()


def mask_of(geoms, all_touched=False) -> np.ndarray:
    """Boolean grid: cell centre inside any of the geometries (or touched, for lines)."""
    geoms = [g for g in geoms if g is not None and not g.is_empty]
    if not geoms:
        return np.zeros((NROWS, NCOLS), bool)
    return rasterize([(g, 1) for g in geoms], out_shape=(NROWS, NCOLS), transform=TRANSFORM,
                     fill=0, all_touched=all_touched, dtype="uint8").astype(bool)


class UnionFind:
    def __init__(self):
        self.parent = {}

    def find(self, a):
        self.parent.setdefault(a, a)
        while self.parent[a] != a:
            self.parent[a] = self.parent[self.parent[a]]
            a = self.parent[a]
        return a

    def union(self, a, b):
        ra, rb = self.find(a), self.find(b)
        if ra != rb:
            self.parent[max(ra, rb)] = min(ra, rb)


# ---------------------------------------------------------------- the scenario


def build_geography(rng):
    """Island, highlands, river, reserve, lake, wetland, flood zones, settlements."""
    g = {}
    island = blob(rng, *CENTRE, 18_500.0, 13_500.0, rot=0.08, rough=0.16, kmax=9, n=720)
    # stretch so the island fills the rectangle with a 400-700 m sea margin all round
    minx, miny, maxx, maxy = island.bounds
    tx = np.interp(np.asarray(island.exterior.coords)[:, 0], [minx, maxx], [X0 + 450.0, X1 - 700.0])
    ty = np.interp(np.asarray(island.exterior.coords)[:, 1], [miny, maxy], [Y0 + 600.0, Y1 - 400.0])
    island = Polygon(np.column_stack([tx, ty]))
    assert island.is_valid
    g["island"] = island

    highland = along(island, 125.0, 0.38)
    g["highland"] = highland
    reserve = blob(rng, *highland, 3_600.0, 2_500.0, rot=0.5, rough=0.12).intersection(island.buffer(-400.0))
    g["reserve"] = reserve
    lake = blob(rng, *(highland + np.array([-1_300.0, 700.0])), 650.0, 420.0, rot=0.3, rough=0.1)
    g["lake"] = lake

    # main river: from the highlands to the south-east coast
    mouth = coast_point(island, -58.0)
    source = highland + np.array([900.0, -300.0])
    d = mouth - source
    ts = np.linspace(0.0, 1.0, 9)
    offs = np.concatenate([[0.0], rng.normal(0.0, 700.0, size=7), [0.0]])
    ctrl = np.array([source + t * d + perp(unit(d)) * o for t, o in zip(ts, offs)])
    ctrl = np.vstack([ctrl, mouth + unit(d) * 1_500.0])  # run past the coast, then clip
    pts = chaikin(ctrl, 4)
    river = LineString(pts).intersection(island)
    if river.geom_type != "LineString":
        river = max(shapely.get_parts(river), key=lambda p: p.distance(Point(source)) == 0)
    assert river.geom_type == "LineString" and river.length > 15_000
    g["river"] = river
    g["mouth"] = np.asarray(river.coords[-1])

    # tributary joining the main river at one of its vertices
    coords = np.asarray(river.coords)
    cum = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(coords, axis=0).T))])
    j = int(np.searchsorted(cum, 0.45 * river.length))
    confluence = coords[j]
    trib_src = along(island, 72.0, 0.62)
    trib = curved_path(rng, trib_src, confluence, bend_sd=0.1, wiggle_sd=0.04, step=150.0)
    g["tributary"] = trib

    # wetland on one bank of the lower-middle river
    s = 0.66 * river.length
    p = np.asarray(river.interpolate(s).coords[0])
    q = np.asarray(river.interpolate(s + 200.0).coords[0])
    tangent = unit(q - p)
    wet_c = p + perp(tangent) * 700.0
    wetland = blob(rng, *wet_c, 1_700.0, 850.0, rot=np.arctan2(*tangent[::-1]), rough=0.1)
    g["wetland"] = wetland.intersection(island.buffer(-300.0))

    # flood zones: along the middle and lower river, the lower tributary, and a coastal strip
    def sub(line, a, b):
        return substring(line, a * line.length, b * line.length)

    mid_r, low_r = sub(river, 0.30, 0.65), sub(river, 0.65, 1.0)
    trib_low = sub(trib, 0.5, 1.0)
    near_mouth = Point(g["mouth"]).buffer(6_000.0)
    coast_band_a = island.difference(island.buffer(-300.0)).intersection(near_mouth)
    coast_band_x = island.buffer(-300.0).difference(island.buffer(-750.0)).intersection(
        Point(g["mouth"]).buffer(7_500.0))
    # (class, depth in m, area) in priority order; each zone keeps only what no
    # earlier zone has, so the zones never overlap
    sources = [
        ("AE", 2.2, low_r.buffer(150.0)),
        ("AE", 1.4, mid_r.buffer(110.0)),
        ("A", 1.1, coast_band_a),
        ("A", 0.9, low_r.buffer(450.0)),
        ("A", 0.7, mid_r.buffer(350.0)),
        ("A", 0.6, trib_low.buffer(180.0)),
        ("X", 0.4, coast_band_x),
        ("X", 0.3, shapely.union_all([mid_r.buffer(700.0), low_r.buffer(900.0), trib_low.buffer(420.0)])),
    ]
    zones = []
    taken = Polygon()
    for cls, depth, geom in sources:
        geom = geom.intersection(island).difference(taken)
        taken = taken.union(geom)
        for part in shapely.get_parts(geom):
            if part.geom_type == "Polygon" and part.area >= 10_000.0:
                zones.append((cls, depth, part))
    g["flood_zones"] = zones
    g["flood_ae_a"] = shapely.union_all([z[2] for z in zones if z[0] in ("AE", "A")])
    g["flood_x"] = shapely.union_all([z[2] for z in zones if z[0] == "X"])
    g["flood_any"] = shapely.union_all([z[2] for z in zones])

    # towns
    towns = []
    inward = unit(CENTRE - g["mouth"])
    pe = g["mouth"] + inward * 1_900.0 + perp(inward) * 350.0
    towns.append(dict(name=TOWNS[0][0], pop=TOWNS[0][1], xy=pe, radius=2_300.0))
    for (name, pop, frac, bearing), radius in zip(TOWNS[1:], (2_100.0, 1_700.0)):
        towns.append(dict(name=name, pop=pop, xy=along(island, bearing, frac), radius=radius))
    for t in towns:
        assert island.contains(Point(t["xy"]))
    g["towns"] = towns

    # villages: away from towns, each other, the coast and the constraint areas
    avoid = shapely.union_all([reserve.buffer(500.0), g["wetland"].buffer(500.0), lake.buffer(500.0),
                               g["flood_any"].buffer(300.0)])
    inner = island.buffer(-1_200.0)
    villages = []
    while len(villages) < len(VILLAGES):
        xy = np.array([rng.uniform(X0, X1), rng.uniform(Y0, Y1)])
        pt = Point(xy)
        if not inner.contains(pt) or avoid.contains(pt):
            continue
        if any(np.hypot(*(xy - t["xy"])) < t["radius"] + 2_500.0 for t in towns):
            continue
        if any(np.hypot(*(xy - v["xy"])) < 4_000.0 for v in villages):
            continue
        name, pop = VILLAGES[len(villages)]
        villages.append(dict(name=name, pop=pop, xy=xy, radius=500.0))
    g["villages"] = villages
    return g


def build_grids(rng, g):
    """Population (float32 people per cell) and land use (uint8) on the study grid."""
    cols, rows = np.meshgrid(np.arange(NCOLS), np.arange(NROWS))
    X = X0 + (cols + 0.5) * CELL
    Y = Y1 - (rows + 0.5) * CELL
    island = g["island"]
    land = shapely.contains_xy(island, X, Y)
    # cells whose whole square lies on the island (half diagonal 70.7 m < 71 m);
    # only these get people, so coast cells never split people with the sea
    full = shapely.contains_xy(island.buffer(-71.0), X, Y)

    river_cells = mask_of([g["river"], g["tributary"]], all_touched=True)
    lake = mask_of([g["lake"]])
    water = (river_cells | lake) & land
    wetland = mask_of([g["wetland"]]) & land & ~water
    reserve = mask_of([g["reserve"]]) & land
    ae_core = mask_of([z[2] for z in g["flood_zones"] if z[0] == "AE"]) | mask_of(
        [g["river"].buffer(160.0), g["tributary"].buffer(100.0)])

    # elevation-like field: a dome on the highlands plus smooth noise -> forest
    hx, hy = g["highland"]
    dome = np.exp(-((X - hx) ** 2 + (Y - hy) ** 2) / (2 * 6_000.0**2))
    elev = dome + 0.25 * noise(rng, 12.0)
    forest = land & ((elev > 0.62) | (noise(rng, 6.0) > 1.35) | reserve) & ~water & ~wetland
    for s in g["towns"] + g["villages"]:  # settlements have cleared their land
        forest &= (X - s["xy"][0]) ** 2 + (Y - s["xy"][1]) ** 2 > s["radius"] ** 2
    forest |= reserve & land & ~water & ~wetland

    # industrial patches: one by each town, towards the coast or along the way out
    industrial = np.zeros_like(land)
    for t in g["towns"]:
        cx, cy = t["xy"]
        direction = unit(t["xy"] - CENTRE)
        ix, iy = t["xy"] + direction * 0.75 * t["radius"] + perp(direction) * 0.4 * t["radius"]
        industrial |= ((X - ix) ** 2 / 450.0**2 + (Y - iy) ** 2 / 300.0**2) < 1.0
    industrial &= land & ~water & ~ae_core

    no_people = ~full | water | wetland | reserve | ae_core
    pop = np.zeros((NROWS, NCOLS))
    lognoise = np.exp(0.35 * noise(rng, 1.5))
    for s in g["towns"] + g["villages"]:
        cx, cy = s["xy"]
        sig = s["radius"] / 2.0
        rot = rng.uniform(0.0, np.pi)
        ratio = rng.uniform(1.1, 1.5)
        u = (X - cx) * np.cos(rot) + (Y - cy) * np.sin(rot)
        v = -(X - cx) * np.sin(rot) + (Y - cy) * np.cos(rot)
        r2 = (u / (sig * ratio)) ** 2 + (v * ratio / sig) ** 2
        core = np.exp(-0.5 * r2)
        halo = np.exp(-0.5 * r2 / 2.6**2)
        dens = (0.78 * core + 0.22 * halo / 2.6**2) * lognoise
        dens = np.where(industrial, 0.03 * dens, dens)
        dens[no_people | forest & (core < 0.2)] = 0.0
        pop += s["pop"] * dens / dens.sum()
    settled = pop.sum()
    g["settled_people"] = float(settled)

    # rural people: clustered farms and hamlets, none in forest, sparse by the coast
    rural = rng.gamma(0.6, 1.0, size=(NROWS, NCOLS)) * np.exp(0.8 * noise(rng, 4.0))
    rural[noise(rng, 3.0) < -0.1] = 0.0  # empty stretches of farmland
    rural[no_people | forest | industrial] = 0.0
    coast_d = shapely.distance(island.exterior, shapely.points(X, Y))
    rural *= np.clip(coast_d / 1_500.0, 0.15, 1.0)
    pop += (TARGET_TOTAL - settled) * rural / rural.sum()
    pop[~land] = -1.0
    pop32 = pop.astype(np.float32)

    # land use, later rules override earlier ones
    lu = np.zeros((NROWS, NCOLS), np.uint8)
    lu[land] = 4
    lu[forest] = 5
    residential = land & (pop > 7.0) & ~forest
    lu[residential] = 1
    for t in g["towns"]:
        cx, cy = t["xy"]
        core = ((X - cx) ** 2 + (Y - cy) ** 2 < (0.28 * t["radius"]) ** 2) & land & (pop > 5.0)
        lu[core] = 2
    lu[industrial] = 3
    lu[wetland] = 6
    lu[water] = 7
    return pop32, lu, dict(X=X, Y=Y, land=land, full=full)


def town_lattice(rng, t, island, keep_out, rivers, spacing=220.0, n_bridges=3):
    """A slightly rotated street grid inside a town: nodes and block-long edges."""
    cx, cy = t["xy"]
    rot = rng.uniform(-0.35, 0.35)
    e1 = np.array([np.cos(rot), np.sin(rot)]) * spacing
    e2 = perp(e1)
    k = int(1.6 * t["radius"] / spacing) + 2
    rough = blob(rng, cx, cy, 1.15 * t["radius"], t["radius"], rot=rng.uniform(0, np.pi), rough=0.15)
    inside = rough.intersection(island.buffer(-150.0)).difference(keep_out)
    nodes = {}
    for i in range(-k, k + 1):
        for j in range(-k, k + 1):
            xy = np.array([cx, cy]) + i * e1 + j * e2
            if inside.contains(Point(xy)):
                nodes[(i, j)] = xy
    land_ok = island.buffer(-100.0)
    edges = []
    for (i, j), xy in nodes.items():
        for di, dj in ((1, 0), (0, 1)):
            other = (i + di, j + dj)
            if other in nodes:
                seg = LineString([xy, nodes[other]])
                if land_ok.contains(seg) and not keep_out.intersects(seg):
                    edges.append(((i, j), other))
    # streets stop at the river except for the few bridges nearest the centre
    centre = Point(cx, cy)
    segs = {e: LineString([nodes[e[0]], nodes[e[1]]]) for e in edges}
    crossing = [e for e in edges if rivers.intersects(segs[e])]
    bridges = sorted(crossing, key=lambda e: (segs[e].centroid.distance(centre), e))[:n_bridges]
    edges = [e for e in edges if e not in crossing or e in bridges]
    uf = UnionFind()
    for a, b in edges:
        uf.union(a, b)
    if (0, 0) not in nodes:
        raise RuntimeError(f"town centre of {t['name']} fell outside its street grid")
    root = uf.find((0, 0))
    edges = [(a, b) for a, b in edges if uf.find(a) == root]
    used = {n for e in edges for n in e}
    return {n: nodes[n] for n in used}, edges, e1, e2


def lattice_path(a, b):
    """Edges of an L-shaped lattice walk from node a to node b (along i, then along j)."""
    (i, j), (ti, tj) = a, b
    path = []
    while i != ti:
        n = i + (1 if ti > i else -1)
        path.append(((i, j), (n, j)))
        i = n
    while j != tj:
        n = j + (1 if tj > j else -1)
        path.append(((i, j), (i, n)))
        j = n
    return [tuple(sorted(e)) for e in path]


def build_roads(rng, g):
    island = g["island"]
    keep_out = shapely.union_all([g["lake"], g["wetland"]])
    on_land = island.buffer(-100.0)
    rivers = shapely.union_all([g["river"], g["tributary"]])
    lines = []  # (LineString, road_class, speed, wanted direction or None)
    lattices = []
    for t in g["towns"]:
        nodes, edges, e1, e2 = town_lattice(rng, t, island, keep_out, rivers)
        lattices.append((t, nodes, edges, e1, e2))

    # arterials between each pair of towns, entering at the town edge and
    # continuing along the grid to the centre
    net_vertices = []
    arterial_edges = [set() for _ in lattices]
    pairs = [(0, 1), (1, 2), (2, 0)]
    for a, b in pairs:
        ta, na = lattices[a][0], lattices[a][1]
        tb, nb = lattices[b][0], lattices[b][1]

        def gate(t, nodes, towards):
            aim = t["xy"] + unit(towards - t["xy"]) * t["radius"]
            keys = sorted(nodes)
            return min(keys, key=lambda n: np.hypot(*(nodes[n] - aim)))

        ga, gb = gate(ta, na, tb["xy"]), gate(tb, nb, ta["xy"])
        for _ in range(50):
            line = curved_path(rng, na[ga], nb[gb], bend_sd=0.08, wiggle_sd=0.02, step=250.0)
            if on_land.contains(line) and not keep_out.intersects(line):
                break
        else:
            raise RuntimeError("no on-land arterial found")
        lines.append((line, "arterial", ROAD_SPEED_KMH["arterial"], None))
        net_vertices.extend(np.asarray(line.coords))
        arterial_edges[a].update(lattice_path(ga, (0, 0)) if (0, 0) in na else [])
        arterial_edges[b].update(lattice_path(gb, (0, 0)) if (0, 0) in nb else [])

    oneway_dirs = {}
    for k, (t, nodes, edges, e1, e2) in enumerate(lattices):
        if k == 0:  # a one-way couplet in the core of the biggest town
            for i in range(-3, 3):
                oneway_dirs[((i, 1), (i + 1, 1))] = e1
                oneway_dirs[((i, -1), (i + 1, -1))] = -e1
        for a, b in edges:
            key = tuple(sorted((a, b)))
            seg = LineString([nodes[a], nodes[b]])
            if key in arterial_edges[k]:
                lines.append((seg, "arterial", TOWN_ARTERIAL_SPEED_KMH, None))
            elif k == 0 and key in oneway_dirs:
                lines.append((seg, "local", ROAD_SPEED_KMH["local"], oneway_dirs[key]))
            else:
                lines.append((seg, "local", ROAD_SPEED_KMH["local"], None))
        net_vertices.extend(nodes.values())

    # collectors: each village to the nearest point already on the network
    villages = sorted(g["villages"], key=lambda v: min(np.hypot(*(v["xy"] - t["xy"])) for t in g["towns"]))
    linked = []
    for v in villages:
        verts = np.array(net_vertices)
        order = np.argsort(np.hypot(*(verts - v["xy"]).T))
        done = False
        for idx in order[:40]:
            for _ in range(5):
                line = curved_path(rng, v["xy"], verts[idx], bend_sd=0.1, wiggle_sd=0.03, step=250.0)
                if on_land.contains(line) and not keep_out.intersects(line) and line.length > 300:
                    done = True
                    break
            if done:
                break
        if not done:
            raise RuntimeError(f"could not link village {v['name']}")
        lines.append((line, "collector", ROAD_SPEED_KMH["collector"], None))
        net_vertices.extend(np.asarray(line.coords))
        linked.append(v)
        # a few village streets
        for ang in rng.uniform(0.0, 2 * np.pi, size=3):
            end = v["xy"] + 450.0 * np.array([np.cos(ang), np.sin(ang)])
            street = LineString([v["xy"], v["xy"] + 0.5 * (end - v["xy"]) + rng.normal(0, 30, 2), end])
            if on_land.contains(street) and not keep_out.intersects(street):
                lines.append((street, "local", ROAD_SPEED_KMH["local"], None))
    # a few extra collectors between neighbouring villages make loops
    for v in linked[::3]:
        others = sorted((w for w in linked if w is not v), key=lambda w: np.hypot(*(w["xy"] - v["xy"])))
        for w in others[:2]:
            line = curved_path(rng, v["xy"], w["xy"], bend_sd=0.1, wiggle_sd=0.03, step=250.0)
            if on_land.contains(line) and not keep_out.intersects(line):
                lines.append((line, "collector", ROAD_SPEED_KMH["collector"], None))
                break

    return node_roads(lines), lattices, lines


def node_roads(lines):
    """Node the lines into the road layer: split every line where another one
    meets or crosses it, on a 1 cm grid, so that lines meet only at shared vertices."""
    geoms = [ln[0] for ln in lines]
    noded = shapely.get_parts(shapely.unary_union(geoms, grid_size=0.01))
    tree = shapely.STRtree(geoms)
    mids = shapely.line_interpolate_point(noded, 0.5, normalized=True)
    src = tree.query_nearest(mids, return_distance=False, all_matches=False)[1]
    rank = {"arterial": 0, "collector": 1, "local": 2, "track": 3}
    recs = []
    for piece, s in zip(noded, src):
        _, cls, speed, want = lines[s]
        oneway = 0
        if want is not None:
            c = np.asarray(piece.coords)
            if np.dot(c[-1] - c[0], want) < 0:
                piece = shapely.reverse(piece)
            oneway = 1
        recs.append((rank[cls], piece.bounds[0], piece.bounds[1], cls, speed, oneway, piece))
    recs.sort(key=lambda r: r[:3])
    roads = gpd.GeoDataFrame(
        {
            "road_id": np.arange(1, len(recs) + 1, dtype=np.int32),
            "road_class": [r[3] for r in recs],
            "speed_kmh": np.array([r[4] for r in recs], dtype=float),
            "oneway": np.array([r[5] for r in recs], dtype=np.int32),
        },
        geometry=[r[6] for r in recs],
        crs=CRS,
    )
    # the network must be one piece when vertices are shared
    uf = UnionFind()
    for geom in roads.geometry:
        c = [tuple(p) for p in np.asarray(geom.coords)]
        for p, q in zip(c[:-1], c[1:]):
            uf.union(p, q)
    roots = {uf.find(p) for p in uf.parent}
    assert len(roots) == 1, f"road network falls into {len(roots)} pieces"
    return roads


def box_sum(a: np.ndarray, half: int) -> np.ndarray:
    """Sum of a over the (2 half + 1)-cell square around every cell (zero outside)."""
    c = np.pad(a, ((half + 1, half), (half + 1, half))).cumsum(0).cumsum(1)
    k = 2 * half + 1
    return c[k:, k:] - c[:-k, k:] - c[k:, :-k] + c[:-k, :-k]


def build_rural_roads(rng, g, pop32, grid, lines, parcels, stations, reach=RURAL_REACH_M,
                      share=RURAL_TARGET_SHARE):
    """Rural collectors and tracks that bring the countryside within reach of a road.

    Grown greedily after everything that depends on the town-and-village network
    (stations, parcels) is placed, so those layers do not change.  Each step takes
    the populated cell with the most people still out of reach around it (in a
    square window) and draws a road from the nearest road it can get to without
    touching the sea margin, a river, the lake, the wetland, the reserve, a parcel
    or a station.  Drawn from the farm end, the road stops at the first road it
    meets, so new roads join the network at a shared vertex and never cross a road;
    beyond its first 40 m it keeps 25 m from every other road.  First come up to
    20 collectors (60 km/h) into the widest empty stretches (people more than
    2 km from a road), carried on to a road ahead within 6 km where there is one.
    Then tracks: spurs to farms (30 km/h), or through tracks (40 km/h) where a
    road lies within 900 m ahead of the spur's end.  Stops once ``share`` of the
    people live within ``reach`` of a road.  Returns the noded road layer.
    """
    island = g["island"]
    on_land = island.buffer(-100.0)
    rivers = shapely.union_all([g["river"], g["tributary"]])
    blocked = shapely.union_all([g["lake"], g["wetland"], g["reserve"], rivers.buffer(40.0),
                                 *parcels.geometry.buffer(15.0), *stations.geometry.buffer(15.0)])
    shapely.prepare(on_land)
    shapely.prepare(blocked)
    X, Y = grid["X"], grid["Y"]
    people = np.where(pop32 > 0, pop32, 0.0).astype(np.float64)
    sel = people > 0
    px, py, w = X[sel], Y[sel], people[sel]
    cells = shapely.points(px, py)
    total = w.sum()
    geoms = [ln[0] for ln in lines]
    tree = shapely.STRtree(geoms)
    (i_in, _), dist = tree.query_nearest(cells, return_distance=True, all_matches=False)
    d = np.empty(len(w))
    d[i_in] = dist
    lines = list(lines)
    n_base = len(lines)

    def clear_of_network(line, ends, tree):
        core = line.difference(shapely.union_all([Point(e).buffer(40.0) for e in ends]))
        return core.is_empty or not len(tree.query(core, predicate="dwithin", distance=25.0))

    def ok(line):
        return line.is_simple and on_land.contains(line) and not blocked.intersects(line)

    def anchors(tree, geoms, xy, max_d, exclude=None):
        """Nearest points of the nearest roads, closest first."""
        pt = Point(xy)
        idx = tree.query(pt, predicate="dwithin", distance=max_d)
        near = np.asarray(geoms, dtype=object)[idx]
        q = shapely.get_coordinates(shapely.line_interpolate_point(near, shapely.line_locate_point(near, pt)))
        dq = np.hypot(*(q - xy).T)
        keep = np.ones(len(q), bool) if exclude is None else np.hypot(*(q - exclude).T) > 1_500.0
        order = np.lexsort((idx[keep], np.round(dq[keep], 3)))
        return list(q[keep][order])

    def first_road(spur, tree, geoms):
        """Cut a spur drawn from a road to a farm where, coming from the farm, it first meets a road."""
        hits = shapely.intersection(spur, np.asarray(geoms, dtype=object)[tree.query(spur)])
        at = shapely.line_locate_point(spur, shapely.points(shapely.get_coordinates(hits)))
        at = at[at < spur.length - 1e-6]
        if len(at) == 0:
            return spur
        return substring(spur, float(at.max()), spur.length)

    def update(line):
        x0, y0, x1, y1 = line.bounds
        near = (px > x0 - reach - 1) & (px < x1 + reach + 1) & (py > y0 - reach - 1) & (py < y1 + reach + 1)
        d[near] = np.minimum(d[near], shapely.distance(line, cells[near]))

    phases = [("collector", 15, 2_000.0, 20), ("track", 7, reach, 4_000)]
    for cls, half, limit, max_new in phases:
        made = 0
        skip = np.zeros(X.shape, bool)  # places this phase could not link
        while made < max_new and w[d > reach].sum() > (1.0 - share) * total:
            far = np.zeros(X.shape)
            far[sel] = np.where(d > limit, w, 0.0)
            score = box_sum(far, half)
            score[skip | (far == 0.0)] = -1.0  # aim at a cell that is itself far from the roads
            r, c = np.unravel_index(int(np.argmax(score)), score.shape)
            if score[r, c] < 1.0:  # (the box sums carry rounding noise near 0)
                break
            target = np.array([X[r, c], Y[r, c]]) + rng.normal(0.0, 30.0, 2)
            geoms = [ln[0] for ln in lines]
            tree = shapely.STRtree(geoms)
            line = None
            for a in anchors(tree, geoms, target, 6_000.0)[:8]:
                for _ in range(3):
                    spur = first_road(curved_path(rng, a, target, bend_sd=0.08, wiggle_sd=0.02, step=250.0),
                                      tree, geoms)
                    if spur.length > 150.0 and ok(spur) and clear_of_network(spur, [spur.coords[0]], tree):
                        line = spur
                        break
                if line is not None:
                    break
            if line is None:
                skip[max(r - 3, 0):r + 4, max(c - 3, 0):c + 4] = True
                continue
            a = np.asarray(line.coords[0])
            # carry on to another road when one is near enough ahead (a through road)
            heading = unit(target - a)
            through = None
            reach_on = 6_000.0 if cls == "collector" else 900.0
            for b in anchors(tree, geoms, target, reach_on, exclude=a)[:6]:
                if np.dot(unit(b - target), heading) < 0.3:
                    continue
                rest = curved_path(rng, target, b, bend_sd=0.06, wiggle_sd=0.02, step=250.0)
                full = LineString(np.vstack([np.asarray(line.coords), np.asarray(rest.coords)[1:]]))
                if ok(full) and clear_of_network(full, [a, b], tree):
                    through = full
                    break
            if through is not None:
                line = through
            if cls == "collector":
                speed = ROAD_SPEED_KMH[cls]
            else:
                speed = TRACK_SPEED_KMH[1] if through is not None else TRACK_SPEED_KMH[0]
            lines.append((line, cls, speed, None))
            update(line)
            made += 1
    roads = node_roads(lines)
    new = lines[n_base:]
    print(f"rural roads     {sum(ln[1] == 'collector' for ln in new)} collectors, "
          f"{sum(ln[1] == 'track' for ln in new)} tracks; people within {reach:.0f} m of a road "
          f"{100.0 * w[d <= reach].sum() / total:.2f} %")
    return roads


def build_census(rng, g, pop32, grid):
    """Census areas tiling the island; pop = area-weighted zonal sum of the grid."""
    island = g["island"]
    seeds = []

    def far_enough(xy, dmin):
        return all(np.hypot(*(xy - s)) >= dmin for s in seeds)

    for t, n in zip(g["towns"], (16, 12, 9)):
        tries = 0
        got = 0
        while got < n and tries < 5_000:
            tries += 1
            xy = t["xy"] + rng.normal(0.0, 0.55 * t["radius"], 2)
            if island.buffer(-200.0).contains(Point(xy)) and far_enough(xy, 0.3 * t["radius"]):
                seeds.append(xy)
                got += 1
    for v in g["villages"]:
        if far_enough(v["xy"], 800.0):
            seeds.append(v["xy"].copy())
    tries = 0
    while len(seeds) < 100 and tries < 20_000:
        tries += 1
        xy = np.array([rng.uniform(X0, X1), rng.uniform(Y0, Y1)])
        if island.buffer(-500.0).contains(Point(xy)) and far_enough(xy, 3_000.0):
            seeds.append(xy)
    seeds = np.array(seeds)
    # code areas north to south, then west to east, in 2 km bands
    order = np.lexsort((seeds[:, 0], -np.floor(seeds[:, 1] / 2_000.0)))
    seeds = seeds[order]
    # Voronoi regions made of whole grid cells (each cell goes to its nearest
    # seed), cut to the coastline.  Inner boundaries follow cell edges, so a
    # cell's people belong to exactly one area and "cell centre inside" and
    # "area-weighted overlap" zonal sums agree; coast cells that the outline
    # cuts carry no people (see build_grids), so the coastline cannot split them.
    X, Y = grid["X"], grid["Y"]
    best = np.full(X.shape, np.inf)
    labels = np.zeros(X.shape, np.int32)
    for k, (sx, sy) in enumerate(seeds):
        d2 = (X - sx) ** 2 + (Y - sy) ** 2
        closer = d2 < best
        best[closer] = d2[closer]
        labels[closer] = k
    pieces = [[] for _ in seeds]
    for geom, k in shapes(labels, transform=TRANSFORM):
        pieces[int(k)].append(shape(geom))
    cells = [shapely.union_all(p).intersection(island) for p in pieces]
    cells = [shapely.normalize(c) if c.geom_type == "Polygon" else c for c in cells]

    # area names: nearest settlement, numbered within it
    places = g["towns"] + g["villages"]
    names = []
    counter = {}
    for c, s in zip(cells, seeds):
        d = [np.hypot(*(s - p["xy"])) for p in places]
        p = places[int(np.argmin(d))]
        base = p["name"] if min(d) < p["radius"] * 1.6 else f"{p['name']} Rural"
        counter[base] = counter.get(base, 0) + 1
        names.append((base, counter[base]))
    totals = {}
    for base, _ in names:
        totals[base] = totals.get(base, 0) + 1
    area_names = [b if totals[b] == 1 else f"{b} {k}" for b, k in names]

    # exact area-weighted zonal sums: each populated cell shares its people
    # among the areas in proportion to the overlap area (with the cell-edge
    # boundaries above every fraction is 1 or 0, but nothing here relies on it)
    sel = pop32 > 0
    vals = pop32[sel].astype(np.float64)
    boxes = shapely.box(X[sel] - 50.0, Y[sel] - 50.0, X[sel] + 50.0, Y[sel] + 50.0)
    tree = shapely.STRtree(cells)
    bi, ci = tree.query(boxes, predicate="intersects")
    frac = np.ones(len(bi))
    cells_arr = np.array(cells, dtype=object)
    shapely.prepare(cells_arr)
    inside = shapely.contains_properly(cells_arr[ci], boxes[bi])
    part = ~inside
    frac[part] = shapely.area(shapely.intersection(boxes[bi[part]], cells_arr[ci[part]])) / (CELL * CELL)
    exact = np.bincount(ci, weights=vals[bi] * frac, minlength=len(cells))
    # largest-remainder rounding keeps the integer total at the rounded grid total
    total = int(round(vals.sum()))
    base = np.floor(exact).astype(np.int64)
    short = total - base.sum()
    rem_order = np.argsort(-(exact - base), kind="stable")
    base[rem_order[:short]] += 1

    geoms = cells
    if any(c.geom_type != "Polygon" for c in cells):
        geoms = [shapely.multipolygons([c]) if c.geom_type == "Polygon" else c for c in cells]
    census = gpd.GeoDataFrame(
        {
            "area_code": [f"TI-{k + 1:03d}" for k in range(len(cells))],
            "area_name": area_names,
            "pop": base.astype(np.int64),
        },
        geometry=geoms,
        crs=CRS,
    )
    return census, exact


def build_stations(g, lattices, roads):
    fl = g["flood_any"]
    t0, nodes0 = lattices[0][0], lattices[0][1]
    t1, nodes1 = lattices[1][0], lattices[1][1]

    def dry_node(nodes, centre):
        for n in sorted(nodes, key=lambda n: (np.hypot(*(nodes[n] - centre)), n)):
            pt = Point(nodes[n] + np.array([30.0, 25.0]))
            if fl.distance(pt) > 150.0:
                return pt
        raise RuntimeError("no dry site for a station")

    meskett = next(v for v in g["villages"] if v["name"] == "Meskett")
    st1 = dry_node(nodes0, t0["xy"])
    st2 = dry_node(nodes1, t1["xy"] + np.array([0.0, 600.0]))
    st3 = Point(meskett["xy"] + np.array([40.0, -35.0]))
    # the optional one: by a bridge over the river, inside a high flood zone (on purpose)
    st4 = None
    for cls in ("arterial", "collector", "local"):
        net = shapely.union_all(roads.geometry[roads.road_class == cls].values)
        cross = sorted(shapely.get_parts(net.intersection(g["river"])), key=lambda p: g["river"].project(p))
        for bridge in cross:
            if bridge.geom_type != "Point":
                continue
            pt = Point(bridge.x + 60.0, bridge.y + 40.0)
            if g["flood_ae_a"].contains(pt):
                st4 = pt
                break
        if st4 is not None:
            break
    if st4 is None:
        raise RuntimeError("no bridge inside a high flood zone for the optional station")
    stations = gpd.GeoDataFrame(
        {
            "station_id": ["ST-01", "ST-02", "ST-03", "ST-04"],
            "name": [f"{t0['name']} Central", f"{t1['name']} North", "Meskett", "Sarrowen Bridge"],
            "status": ["kept", "kept", "kept", "optional"],
            "cost": [0.0, 0.0, 0.0, 0.0],
        },
        geometry=[st1, st2, st3, st4],
        crs=CRS,
    )
    for i in range(3):
        assert not fl.intersects(stations.geometry[i]), "a kept station lies in a flood zone"
    assert g["flood_ae_a"].intersects(st4), "the optional station should sit in a high flood zone"
    return stations


def build_parcels(rng, g, roads, n_total=300, n_hard=45, n_x=18):
    """Candidate parcels; a quota of them near the flood zones and protected land."""
    island = g["island"]
    hard = shapely.union_all([g["flood_ae_a"], g["reserve"], g["wetland"]])
    xzone = g["flood_x"]
    hard_b, x_b = hard.buffer(50.0), xzone.buffer(50.0)
    forbidden = shapely.union_all([g["lake"], g["river"].buffer(40.0), g["tributary"].buffer(30.0)])
    ok_area = island.buffer(-80.0)
    road_tree = shapely.STRtree(roads.geometry.values)
    towns = g["towns"]
    road_geoms = roads.geometry.values
    boundaries = [shapely.boundary(hard), shapely.boundary(xzone)]
    want = {"hard": n_hard, "x": n_x, "free": n_total - n_hard - n_x}
    got = {"hard": [], "x": [], "free": []}
    placed = []
    tries = 0
    while any(len(got[k]) < want[k] for k in want):
        tries += 1
        if tries > 200_000:
            raise RuntimeError(f"parcel sampling stalled: {[(k, len(v)) for k, v in got.items()]}")
        mode = rng.uniform()
        if mode < 0.40:
            t = towns[rng.integers(len(towns))]
            xy = t["xy"] + rng.normal(0.0, 0.9 * t["radius"], 2)
        elif mode < 0.72:
            r = road_geoms[rng.integers(len(road_geoms))]
            p = r.interpolate(rng.uniform(0.0, r.length))
            xy = np.array([p.x, p.y]) + rng.normal(0.0, 160.0, 2)
        elif mode < 0.85:
            b = boundaries[int(rng.integers(2))]
            p = b.interpolate(rng.uniform(0.0, b.length))
            xy = np.array([p.x, p.y]) + rng.normal(0.0, 150.0, 2)
        else:
            xy = np.array([rng.uniform(X0, X1), rng.uniform(Y0, Y1)])
        w, h = rng.uniform(50.0, 200.0, 2)
        ang = rng.uniform(0.0, np.pi)
        c, s = np.cos(ang), np.sin(ang)
        corners = np.array([[-w, -h], [w, -h], [w, h], [-w, h]]) / 2.0
        quad = Polygon(xy + corners @ np.array([[c, s], [-s, c]]))
        if not ok_area.contains(quad) or forbidden.intersects(quad):
            continue
        if len(road_tree.query(quad, predicate="dwithin", distance=8.0)):
            continue
        if any(quad.distance(q) < 30.0 for q in placed):  # parcels keep 30 m apart
            continue
        if hard_b.intersects(quad):
            kind = "hard"
        elif x_b.intersects(quad):
            kind = "x"
        else:
            kind = "free"
        if len(got[kind]) >= want[kind]:
            continue
        got[kind].append(quad)
        placed.append(quad)
    # deterministic order: by position, north to south
    placed.sort(key=lambda q: (-round(q.centroid.y, 1), round(q.centroid.x, 1)))
    costs, owners = [], []
    for q in placed:
        cxy = np.array(q.centroid.coords[0])
        d_town = min(np.hypot(*(cxy - t["xy"])) for t in towns)
        value = np.exp(-d_town / 5_000.0)  # land is dearer near towns
        size = q.area / 200.0**2
        cost = 800_000.0 + 1_700_000.0 * (0.65 * value + 0.35 * size) + rng.normal(0.0, 120_000.0)
        costs.append(round(float(np.clip(cost, 800_000.0, 2_500_000.0)), -3))
        owners.append("public" if rng.uniform() < (0.45 if d_town < 3_000 else 0.25) else "private")
    return gpd.GeoDataFrame(
        {"parcel_id": [f"P-{k + 1:04d}" for k in range(len(placed))], "cost": costs, "owner": owners},
        geometry=placed,
        crs=CRS,
    )


# ---------------------------------------------------------------- writing


def write_tif(path: Path, arr: np.ndarray, nodata, description, tags, colormap=None) -> None:
    tmp = path.with_name(path.name + ".part")
    profile = dict(
        driver="GTiff", width=NCOLS, height=NROWS, count=1, dtype=arr.dtype.name, crs=CRS,
        transform=TRANSFORM, nodata=nodata, tiled=True, blockxsize=256, blockysize=256,
        compress="deflate", predictor=3 if arr.dtype.kind == "f" else 2, zlevel=9,
    )
    with rasterio.open(tmp, "w", **profile) as dst:
        dst.write(arr, 1)
        dst.set_band_description(1, description)
        dst.update_tags(**tags)
        if colormap:
            dst.write_colormap(1, colormap)
    os.replace(tmp, path)


def write_gpkg(path: Path, layers: dict[str, gpd.GeoDataFrame]) -> None:
    tmp = path.with_name(path.name + ".part.gpkg")
    if tmp.exists():
        tmp.unlink()
    for name, gdf in layers.items():
        gdf.to_file(tmp, layer=name, driver="GPKG", engine="pyogrio")
    os.replace(tmp, path)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=Path(__file__).resolve().parent,
                    help="directory to write into (default: next to this script)")
    args = ap.parse_args(argv)
    out = args.out
    out.mkdir(parents=True, exist_ok=True)
    assert pyproj.CRS(CRS).to_epsg() == 32626

    rng = np.random.default_rng(SEED)
    g = build_geography(rng)
    pop32, lu, grid = build_grids(rng, g)
    roads, lattices, lines = build_roads(rng, g)
    census, exact = build_census(rng, g, pop32, grid)
    stations = build_stations(g, lattices, roads)
    parcels = build_parcels(rng, g, roads)
    # rural roads last: stations and parcels above were placed against the
    # town-and-village network, and they keep their places
    roads = build_rural_roads(rng, g, pop32, grid, lines, parcels, stations)

    study = gpd.GeoDataFrame({"name": [ISLAND_NAME]}, geometry=[g["island"]], crs=CRS)
    river = gpd.GeoDataFrame({"name": [RIVER_NAME, TRIBUTARY_NAME]},
                             geometry=[g["river"], g["tributary"]], crs=CRS)
    zones = gpd.GeoDataFrame(
        {"zone_class": [z[0] for z in g["flood_zones"]],
         "depth_m": np.array([z[1] for z in g["flood_zones"]], dtype=float)},
        geometry=[z[2] for z in g["flood_zones"]], crs=CRS)
    protected = gpd.GeoDataFrame(
        {"name": [f"{RESERVE_NAME} Reserve", WETLAND_NAME], "designation": ["nature reserve", "wetland"]},
        geometry=[g["reserve"], g["wetland"]], crs=CRS)

    write_tif(out / "tarrow_population_100m.tif", pop32, -1.0, "population_people",
              {"units": "people per cell", "scenario": "Tarrow Isle (invented sample data)"})
    write_tif(out / "tarrow_land_use_100m.tif", lu, 0, "land_use_class",
              {"classes": ";".join(f"{c}={n}" for c, n in LAND_USE_CLASSES),
               "scenario": "Tarrow Isle (invented sample data)"}, colormap=LAND_USE_COLOURS)
    with open(out / "tarrow_land_use_classes.csv", "w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["code", "name"])
        w.writerows(LAND_USE_CLASSES)
    write_gpkg(out / "tarrow.gpkg", {
        "study_area": study,
        "census_areas": census,
        "river": river,
        "flood_zones": zones,
        "protected_land": protected,
        "roads": roads,
        "existing_stations": stations,
        "candidate_parcels": parcels,
    })

    grid_total = float(pop32[pop32 > 0].astype(np.float64).sum())
    hard = shapely.union_all([g["flood_ae_a"], g["reserve"], g["wetland"]]).buffer(50.0)
    near_any = shapely.union_all([hard, g["flood_x"].buffer(50.0)])
    print(f"grid total      {grid_total:12.1f} people on {int((pop32 > 0).sum())} cells")
    print(f"  in towns and villages {g['settled_people']:.0f}, rural {grid_total - g['settled_people']:.0f}")
    print(f"census total    {int(census['pop'].sum()):12d} in {len(census)} areas "
          f"(area-weighted exact {exact.sum():.1f})")
    print(f"roads           {len(roads)} segments "
          f"({', '.join(f'{k} {v}' for k, v in roads.road_class.value_counts().sort_index().items())}), "
          f"{int(roads.oneway.sum())} one-way")
    per_class = zones.zone_class.value_counts().sort_index()
    print(f"flood zones     {len(zones)} ({', '.join(f'{k} {v}' for k, v in per_class.items())})")
    print(f"parcels         {len(parcels)}; within 50 m of A/AE/protected "
          f"{int(parcels.intersects(hard).sum())}, of any flood zone/protected "
          f"{int(parcels.intersects(near_any).sum())}")
    for f in sorted(out.glob("tarrow*")):
        print(f"{f.name:32s} {f.stat().st_size / 1024:8.1f} KiB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
