"""Benchmark: screen_sites against a bare STRtree query of the same pairs, measured in the same run.

100,000 candidate points against a synthetic flood layer of 50,000 polygons
(irregular blobs over a 100 km square), with a setback, given as in-memory
GeoDataFrames so that file reading is not timed.  The baseline is what any
screening must do at least: build a shapely STRtree over the zones and query
the points with ``predicate="dwithin"`` (or ``"intersects"`` for no
setback).  Target (issue 4): screen_sites within 1.5x of the baseline.

screen_sites does more than the baseline: the exact distance of every
candidate pair (to make setbacks exact), the distance to the nearest zone
for every site (for the sites with no zone within the setback: a KD-tree
bound from the zone vertices, then exact distances to the zones whose
envelope is within that bound; ``STRtree.query_nearest`` is timed beside it
for comparison), the validity check of the zones, representative points, the
record.  The script times those parts separately too, so a missed target
says where the time goes.

Run:  /work/venv/bin/python benchmarks/bench_sites.py [--points 100000] [--zones 50000] [--setback 50] [--repeat 1]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def synthetic(n_points: int, n_zones: int, seed: int = 42):
    import geopandas as gpd
    import shapely

    rng = np.random.default_rng(seed)
    side = 100_000.0
    x0, y0 = 400_000.0, 4_000_000.0
    pts = rng.uniform(0, side, size=(n_points, 2)) + [x0, y0]
    centres = rng.uniform(0, side, size=(n_zones, 2)) + [x0, y0]
    # irregular 12-gons of radius 40-250 m: a star-ish flood blob, valid by construction
    k = 12
    ang = np.linspace(0, 2 * np.pi, k, endpoint=False)
    radius = rng.uniform(40, 250, size=(n_zones, 1)) * rng.uniform(0.6, 1.0, size=(n_zones, k))
    ring_x = centres[:, [0]] + radius * np.cos(ang)
    ring_y = centres[:, [1]] + radius * np.sin(ang)
    rings = np.stack([ring_x, ring_y], axis=2)
    rings = np.concatenate([rings, rings[:, :1]], axis=1)
    zones = shapely.polygons(rings)
    crs = "EPSG:32626"
    cands = gpd.GeoDataFrame(geometry=shapely.points(pts), crs=crs)
    flood = gpd.GeoDataFrame({"zone_class": rng.choice(["A", "AE", "X"], size=n_zones)}, geometry=zones, crs=crs)
    return cands, flood


def timed(fn, repeat: int):
    best = float("inf")
    out = None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def main() -> None:
    import shapely

    from geocover.sites import Exclusion, _nearest_distance, _screen_zones, screen_sites

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=100_000)
    parser.add_argument("--zones", type=int, default=50_000)
    parser.add_argument("--setback", type=float, default=50.0)
    parser.add_argument("--repeat", type=int, default=1)
    args = parser.parse_args()

    cands, flood = synthetic(args.points, args.zones)
    pts = np.asarray(cands.geometry.array)
    zones = np.asarray(flood.geometry.array)
    predicate = "dwithin" if args.setback > 0 else "intersects"
    kwargs = {"distance": args.setback} if args.setback > 0 else {}

    def baseline():
        tree = shapely.STRtree(zones)
        return tree.query(pts, predicate=predicate, **kwargs)

    def ours():
        return screen_sites(cands, exclude=[Exclusion(flood, setback_m=args.setback, name="flood")])

    # warm up imports and caches (pyproj, scipy.spatial, GEOS) outside the timings
    screen_sites(cands.iloc[:100], exclude=[Exclusion(flood.iloc[:100], setback_m=args.setback, name="flood")])
    t_base, pairs = timed(baseline, args.repeat)
    t_ours, (sites, record) = timed(ours, args.repeat)

    # the verdict step alone (no nearest distances), and the nearest-distance step alone, on the same data
    xy = shapely.get_coordinates(pts)
    rows = np.arange(len(pts))
    ids = np.arange(len(zones), dtype=np.int64)
    t_verdict, hits = timed(lambda: _screen_zones(pts, xy, rows, zones, ids, args.setback, nearest=False), args.repeat)
    rest = np.flatnonzero(~hits.hit)
    tree = shapely.STRtree(zones)
    t_near, near = timed(lambda: _nearest_distance(tree, zones, pts[rest], xy[rest]), 1)
    t_qn, (_, qn) = timed(lambda: tree.query_nearest(pts[rest], return_distance=True, all_matches=False), 1)
    worst = float(np.max(np.abs(near - qn))) if len(rest) else 0.0

    hit_sites = np.unique(pairs[0])
    rejected = int((record.site_index < 0).sum())
    if args.setback == 0:
        assert rejected == len(hit_sites), "with no setback the verdicts must match the baseline's intersecting pairs"
    print(f"candidates {args.points:,}  zones {args.zones:,}  setback {args.setback:g} m  best of {args.repeat}")
    print(f"baseline STRtree build + query({predicate}):       {t_base:8.3f} s  ({pairs.shape[1]:,} pairs, {len(hit_sites):,} sites)")
    print(f"screen_sites, whole (in-memory layers):          {t_ours:8.3f} s  ({len(sites):,} kept, {rejected:,} rejected)")
    print(f"  ratio to baseline:                             {t_ours / t_base:8.2f} x   (target <= 1.5 x)")
    print(f"verdict step alone (tree, query, exact dist.):   {t_verdict:8.3f} s")
    print(f"  ratio to baseline:                             {t_verdict / t_base:8.2f} x")
    print(f"nearest-zone distance for {len(rest):,} other sites:  {t_near:8.3f} s")
    print(f"  vs STRtree.query_nearest on the same sites:    {t_qn:8.3f} s  (max difference {worst:.2e} m)")


if __name__ == "__main__":
    main()
