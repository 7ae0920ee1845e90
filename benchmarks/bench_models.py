"""Benchmark of the siting models on a synthetic 100 x 100 km region of 1e6 populated 100 m cells.

For each case (candidates uniform or clustered, 2,000 or 10,000 of them, service
distance 2 or 5 km) and each model (LSCP; MCLP with p = 20 and 50) it reports
rows before and after each reduction, seconds per phase, the plan's objective,
bound and gap -- and, in the same run and with the same time limit, the bare
solver (CBC) on the merged-but-otherwise-unreduced model as the baseline.

The coverage is built here with scipy's cKDTree (this script does not depend on
geocover.coverage).  Run it at most once or twice on a shared machine:

    /work/venv/bin/python benchmarks/bench_models.py --cases u2000-5 --time-limit 60
    /work/venv/bin/python benchmarks/bench_models.py --all --time-limit 60

``--cells`` shrinks the grid for a quick look (e.g. ``--cells 200`` = 200 x 200).
Results are printed as a table and written as JSON to benchmarks/results/ (not committed).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from pathlib import Path

import numpy as np
import scipy.sparse as sp
from scipy.spatial import cKDTree

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from geocover.models import cover_all, cover_most  # noqa: E402
from geocover.models.greedy import covered_weight, greedy_cover, greedy_most, prune_cover  # noqa: E402
from geocover.models.reduce import as_pattern, merge_rows  # noqa: E402
from geocover.models.solver import solve_mip  # noqa: E402
from geocover.values import Reach  # noqa: E402

CASES = {
    "u2000-5": ("uniform", 2000, 5000.0),
    "u2000-2": ("uniform", 2000, 2000.0),
    "c2000-5": ("clustered", 2000, 5000.0),
    "c2000-2": ("clustered", 2000, 2000.0),
    "u10000-2": ("uniform", 10000, 2000.0),
    "c10000-2": ("clustered", 10000, 2000.0),
    "u10000-5": ("uniform", 10000, 5000.0),
    "c10000-5": ("clustered", 10000, 5000.0),
}


def region(cells: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Cell centres of a cells x cells grid over 100 km and a clustered population (every cell populated)."""
    size = 100_000.0
    step = size / cells
    c = (np.arange(cells) + 0.5) * step
    xx, yy = np.meshgrid(c, c, indexing="xy")
    xy = np.column_stack([xx.ravel(), yy.ravel()])
    rng = np.random.default_rng(seed)
    towns = rng.uniform(0, size, (40, 2))
    scale = rng.uniform(1500, 8000, 40)
    size_t = rng.lognormal(0, 1, 40)
    dens = np.full(len(xy), 0.05)
    for (tx, ty), s, a in zip(towns, scale, size_t):
        dens += a * np.exp(-((xy[:, 0] - tx) ** 2 + (xy[:, 1] - ty) ** 2) / (2 * s * s))
    pop = rng.poisson(dens * 40.0 * (step / 100.0) ** 2).astype(np.float64) + 1.0  # every cell populated
    return xy, pop


def candidates(kind: str, k: int, seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    if kind == "uniform":
        return rng.uniform(0, 100_000.0, (k, 2))
    centres = rng.uniform(5_000, 95_000, (30, 2))
    pick = rng.integers(0, 30, k)
    return np.clip(centres[pick] + rng.normal(0, 6000, (k, 2)), 0, 100_000.0)


def coverage(demand_xy: np.ndarray, site_xy: np.ndarray, radius: float, chunk: int = 250) -> sp.csr_matrix:
    """Demand x sites 0/1 matrix of pairs within ``radius`` (cKDTree, sites in chunks to bound memory)."""
    tree = cKDTree(demand_xy)
    rows_l, cols_l = [], []
    for s0 in range(0, len(site_xy), chunk):
        lists = tree.query_ball_point(site_xy[s0 : s0 + chunk], radius, return_sorted=True)
        lens = np.fromiter((len(x) for x in lists), dtype=np.int64, count=len(lists))
        if lens.sum():
            rows_l.append(np.concatenate([np.asarray(x, dtype=np.int32) for x in lists if len(x)]))
            cols_l.append(np.repeat(np.arange(s0, s0 + len(lists), dtype=np.int32), lens))
    rows = np.concatenate(rows_l) if rows_l else np.zeros(0, dtype=np.int32)
    cols = np.concatenate(cols_l) if cols_l else np.zeros(0, dtype=np.int32)
    return sp.csr_matrix((np.ones(len(rows), dtype=np.float64), (rows, cols)), shape=(len(demand_xy), len(site_xy)))


def bare_lscp(mat: sp.csr_matrix, time_limit: float) -> dict:
    """The baseline: CBC on the merged (identical rows only) LSCP, same time limit, no start."""
    t = time.perf_counter()
    pat = as_pattern(mat)
    pat = pat[np.diff(pat.indptr) > 0]
    merged, _, _ = merge_rows(pat, np.ones(pat.shape[0]))
    t_merge = time.perf_counter() - t
    m = merged.shape[1]
    res = solve_mip(np.ones(m), merged, np.array([b"G"] * merged.shape[0], dtype=object), np.ones(merged.shape[0]), time_limit=max(time_limit - t_merge, 0.1))
    obj = float(np.round(res.x).sum()) if res.x is not None else math.nan
    return {"rows": int(merged.shape[0]), "objective": obj, "bound": res.bound, "status": res.status, "seconds": time.perf_counter() - t, "build_seconds": res.build_seconds}


def bare_mclp(mat: sp.csr_matrix, weight: np.ndarray, p: int, time_limit: float) -> dict:
    t = time.perf_counter()
    pat = as_pattern(mat)
    keep = np.diff(pat.indptr) > 0
    merged, w, _ = merge_rows(pat[keep], weight[keep])
    n, m = merged.shape
    A = sp.hstack([merged.astype(np.float64), -sp.identity(n, format="csr")], format="csr")
    M = sp.vstack([A, sp.csr_matrix(np.concatenate([np.ones(m), np.zeros(n)])[None, :])], format="csr")
    res = solve_mip(np.concatenate([np.zeros(m), w]), M, np.array([b"G"] * n + [b"L"], dtype=object), np.concatenate([np.zeros(n), [p]]), integer=np.concatenate([np.ones(m, bool), np.zeros(n, bool)]), maximize=True, time_limit=max(time_limit - (time.perf_counter() - t), 0.1))
    obj = covered_weight(merged, w, np.flatnonzero(res.x[:m] > 0.5)) if res.x is not None else math.nan
    return {"rows": int(n), "objective": obj, "bound": res.bound, "status": res.status, "seconds": time.perf_counter() - t, "build_seconds": res.build_seconds}


def run_case(name: str, cells: int, time_limit: float, models: list[str]) -> list[dict]:
    kind, k, radius = CASES[name]
    t = time.perf_counter()
    dxy, pop = region(cells)
    sxy = candidates(kind, k)
    mat = coverage(dxy, sxy, radius)
    t_cov = time.perf_counter() - t
    print(f"\n== {name}: {len(dxy):,} cells, {k} {kind} candidates, {radius / 1000:g} km, {mat.nnz:,} pairs (coverage {t_cov:.1f} s)", flush=True)
    reach = Reach.from_sparse(mat, weight=pop)
    out = []
    for model in models:
        rec: dict = {"case": name, "model": model, "cells": len(dxy), "pairs": int(mat.nnz)}
        if model == "lscp":
            # greedy + prune on the merged rows, for the "never worse than greedy" check
            pat = as_pattern(mat)
            pat = pat[np.diff(pat.indptr) > 0]
            tg = time.perf_counter()
            merged, _, _ = merge_rows(pat, np.ones(pat.shape[0]))
            g = prune_cover(merged, np.ones(k), greedy_cover(merged, np.ones(k)))
            rec["greedy"] = {"objective": float(len(g)), "seconds": time.perf_counter() - tg}
            plan = cover_all(reach, use_cost=False, time_limit=time_limit)
            base = bare_lscp(mat, time_limit)
        else:
            p = int(model.split("-")[1])
            tg = time.perf_counter()
            pat = as_pattern(mat)
            keep = np.diff(pat.indptr) > 0
            merged, w, _ = merge_rows(pat[keep], pop[keep])
            g = greedy_most(merged, w, sites=p)
            rec["greedy"] = {"objective": covered_weight(merged, w, g), "seconds": time.perf_counter() - tg}
            plan = cover_most(reach, sites=p, time_limit=time_limit)
            base = bare_mclp(mat, pop, p, time_limit)
        rec["plan"] = plan.summary()
        rec["phases"] = plan.params.get("phase_seconds", {})
        rec["reduction"] = plan.params.get("reduction", [])
        rec["log"] = list(plan.log)
        rec["baseline"] = base
        build = sum(float(line.split(" in ")[1].split(" s")[0]) for line in plan.log if "built" in line and " in " in line)
        rec["build_seconds"] = build
        out.append(rec)
        sense = 1 if model == "lscp" else -1
        better = (plan.objective - base["objective"]) * sense < 0 if math.isfinite(base["objective"]) else True
        not_worse = (plan.objective - rec["greedy"]["objective"]) * sense <= 1e-9
        print(f"-- {model}: objective {plan.objective:,.6g}  bound {plan.bound:,.6g}  gap {plan.gap:.3%}  status {plan.status.value}  {plan.seconds:.1f} s", flush=True)
        for s in rec["reduction"]:
            print("     reduce:", {kk: (round(v, 3) if isinstance(v, float) else v) for kk, v in s.items()})
        print(f"     phases: {rec['phases']}  build {build:.2f} s ({build / max(plan.seconds, 1e-9):.1%} of total)")
        print(f"     greedy: {rec['greedy']['objective']:,.6g} in {rec['greedy']['seconds']:.2f} s;  plan not worse than greedy: {not_worse}")
        print(f"     bare CBC on the merged model ({base['rows']:,} rows): objective {base['objective']:,.6g}  bound {base['bound']:,.6g}  status {base['status']}  {base['seconds']:.1f} s;  plan strictly better: {better}", flush=True)
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--cases", nargs="*", default=["u2000-5"], choices=sorted(CASES))
    ap.add_argument("--all", action="store_true", help="every case")
    ap.add_argument("--models", nargs="*", default=["lscp", "mclp-20", "mclp-50"])
    ap.add_argument("--cells", type=int, default=1000, help="grid side (1000 = 1e6 cells of 100 m)")
    ap.add_argument("--time-limit", type=float, default=60.0)
    args = ap.parse_args()
    cases = sorted(CASES) if args.all else args.cases
    results = []
    for c in cases:
        results.extend(run_case(c, args.cells, args.time_limit, args.models))
    outdir = Path(__file__).resolve().parent / "results"
    outdir.mkdir(exist_ok=True)
    path = outdir / f"bench_models_{time.strftime('%Y%m%dT%H%M%S')}.json"
    path.write_text(json.dumps(results, indent=1, default=str))
    print(f"\nwritten {path}")


if __name__ == "__main__":
    main()
