"""Backup coverage (Hogan & ReVelle 1986, Management Science 32(11)).

Maximise the people covered at least ``k`` times (``k = 2``: "backup
coverage"), with at most ``sites`` new sites, subject to first coverage of
at least ``first_floor`` x the coverable people.  Dominance reductions are
*not* valid here (Church & Gerrard 2003, Geographical Analysis 35(4)) and
are never applied; only identical demand rows are merged, which is exact
for any model because it only adds up weights.

Formulation (x sites binary, y1 continuous, yk binary)::

    max  sum_i w_i yk_i
    s.t. sum_{j in N_i} x_j - y1_i     >= 0     (first coverage)
         sum_{j in N_i} x_j - k yk_i   >= 0     (k-fold coverage)
         sum_i w_i y1_i >= first_floor * W
         sum_{j new} x_j <= sites,  x_j = 1 for kept sites,  x_i + x_j <= 1 for spacing
"""

from __future__ import annotations

import logging
import math
from typing import Any

import numpy as np
import scipy.sparse as sp

from ..errors import ParameterError
from ..values import Plan, Reach, SiteRole, SolveStatus
from ._common import conflict_matrix, gap_widened, kept_conflict, make_plan, prepare, spacing_rows, start_call, violates_spacing
from .mclp import check_sites
from .reduce import merge_rows
from .solver import solve_mip

logger = logging.getLogger(__name__)

__all__ = ["cover_twice"]


def _values(mat: sp.csr_matrix, w: np.ndarray, x: np.ndarray, k: int) -> tuple[float, float]:
    cnt = np.asarray(mat @ x.astype(np.int64)).ravel()
    return float(w[cnt >= 1].sum()), float(w[cnt >= k].sum())


def _greedy_backup(mat: sp.csr_matrix, w: np.ndarray, paid: np.ndarray, fixed: np.ndarray, p: int, floor_w: float, k: int, conflicts: sp.csr_matrix | None) -> np.ndarray:
    """Greedy: meet the first-coverage floor first, then add k-fold coverage; ties by site order."""
    n, m = mat.shape
    csc = sp.csc_matrix(mat, dtype=np.float64)
    x = np.zeros(m, dtype=bool)
    x[fixed] = True
    ok = ~x
    if conflicts is not None:
        for j in np.flatnonzero(x):
            ok[conflicts.indices[conflicts.indptr[j] : conflicts.indptr[j + 1]]] = False
    used = 0
    while True:
        cnt = np.asarray(mat @ x.astype(np.int64)).ravel()
        first = float(w[cnt >= 1].sum())
        g1 = np.asarray(csc.T @ np.where(cnt == 0, w, 0.0)).ravel()
        gk = np.asarray(csc.T @ np.where(cnt == k - 1, w, 0.0)).ravel()
        prog = np.asarray(csc.T @ np.where(cnt < k, w / k, 0.0)).ravel()
        big = float(w.sum()) + 1.0
        score = (g1 * big * big if first < floor_w else 0.0) + gk * big + prog
        free = ok & ~paid & (score > 0)
        if free.any():
            j = int(np.argmax(np.where(free, score, -1.0)))
        else:
            if used >= p:
                break
            cand = ok & paid & (score > 0)
            if not cand.any():
                break
            j = int(np.argmax(np.where(cand, score, -1.0)))
            used += 1
        x[j] = True
        ok[j] = False
        if conflicts is not None:
            ok[conflicts.indices[conflicts.indptr[j] : conflicts.indptr[j + 1]]] = False
    return np.flatnonzero(x)


def cover_twice(
    reach: Reach,
    *,
    sites: int,
    first_floor: float = 0.9,
    k: int = 2,
    time_limit: float = 60.0,
    rel_gap: float = 1e-4,
    threads: int = 1,
    seed: int = 0,
    solver: str = "cbc",
    reduce: bool = True,
) -> Plan:
    """Backup coverage: most people covered at least ``k`` times, first coverage held to a floor.

    Parameters
    ----------
    reach : Reach
    sites : int
        Number of new (candidate) sites; kept sites are open on top and
        optional existing sites are free, as in :func:`cover_most`.
    first_floor : float
        In [0, 1]: share of the coverable people that must be covered at
        least once.  If no plan with ``sites`` new sites reaches it, the plan
        comes back with status INFEASIBLE (not an error).
    k : int
        Coverage multiplicity to maximise (2 = backup coverage; any k >= 1).
    reduce : bool
        Only merges identical demand rows; dominance rules are never used
        for backup coverage.

    Returns
    -------
    Plan
        ``model == "backup"``; ``objective`` is the weight covered at least
        ``k`` times; ``covered_weight`` the weight covered at least once;
        ``params["first_covered_weight"]`` the same as seen by the model.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> from geocover.values import Reach
    >>> r = Reach.from_sparse(sp.csr_matrix([[1, 1, 0], [0, 1, 1], [0, 0, 1]]), weight=[4, 2, 1])
    >>> p = cover_twice(r, sites=2, first_floor=0.5)
    >>> p.sites.tolist(), p.objective
    ([0, 1], 4.0)
    """
    reach, solver, clock, common = start_call(reach, time_limit=time_limit, rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, reduce=reduce)
    p = check_sites(sites, reach)
    if isinstance(first_floor, bool) or not isinstance(first_floor, (int, float, np.floating)) or not (0 <= float(first_floor) <= 1):
        raise ParameterError(f"first_floor: must be a share in [0, 1] of the coverable people, got {first_floor!r}", param="first_floor")
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
        raise ParameterError(f"k: must be a whole number >= 1 (2 for backup coverage), got {k!r}", param="k")
    k = int(k)
    params: dict[str, Any] = {"sites": p, "first_floor": float(first_floor), "k": k, **common}
    log: list[str] = []
    m = reach.shape[1]
    kept = np.flatnonzero(np.asarray(reach.role) == SiteRole.KEPT)

    def plan(chosen: np.ndarray, obj: float, bound: float, status: SolveStatus) -> Plan:
        return make_plan(reach, chosen, model="backup", objective=obj, bound=bound, status=status, solver=solver, clock=clock, params=params, log=log)

    if kept_conflict(reach):
        log.append("two kept sites are closer than the minimum spacing")
        return plan(kept, math.nan, math.nan, SolveStatus.INFEASIBLE)
    if not reach.coverable.any():
        log.append("no demand can be reached by any site")
        return plan(kept, 0.0, 0.0, SolveStatus.EMPTY)
    prep = prepare(reach)
    mat, w = prep.pattern, prep.weight
    if reduce:
        mat, w, _ = merge_rows(mat, w)
        params["reduction"] = [{"step": "merge identical rows", "rows": int(mat.shape[0])}]
    clock.mark("reduce")
    n = mat.shape[0]
    W = float(w.sum())
    floor_w = float(first_floor) * W
    tol = 1e-9 * max(W, 1.0)
    paid = ~prep.optional
    paid[prep.kept] = False
    conf = conflict_matrix(prep.pairs, m) if len(prep.pairs) else None
    greedy = _greedy_backup(mat, w, paid, kept, p, floor_w - tol, k, conf)
    xg = np.zeros(m, dtype=bool)
    xg[greedy] = True
    g_first, g_k = _values(mat, w, xg, k)
    greedy_ok = g_first >= floor_w - tol
    log.append(f"greedy: first {g_first:.6g}, {k}-fold {g_k:.6g}, floor {'met' if greedy_ok else 'not met'}")
    clock.mark("greedy")
    I = sp.identity(n, format="csr")
    Z = sp.csr_matrix((n, n))
    A = mat.astype(np.float64)
    blocks = [
        sp.hstack([A, -I, Z], format="csr"),
        sp.hstack([A, Z, -float(k) * I], format="csr"),
        sp.csr_matrix(np.concatenate([paid.astype(float), np.zeros(2 * n)])[None, :]),
        sp.csr_matrix(np.concatenate([np.zeros(m), w, np.zeros(n)])[None, :]),
    ]
    sense = [b"G"] * (2 * n) + [b"L", b"G"]
    rhs = [0.0] * (2 * n) + [float(p), floor_w - tol]
    blocks.append(spacing_rows(conf, m + 2 * n))
    sense += [b"L"] * blocks[-1].shape[0]
    rhs += [1.0] * blocks[-1].shape[0]
    M = sp.vstack(blocks, format="csr")
    lb = np.zeros(m + 2 * n)
    lb[kept] = 1.0
    integer = np.concatenate([np.ones(m, dtype=bool), np.zeros(n, dtype=bool), np.ones(n, dtype=bool)])
    c = np.concatenate([np.zeros(m + n), w])
    start = None
    if greedy_ok:
        cnt = np.asarray(mat @ xg.astype(np.int64)).ravel()
        start = np.concatenate([xg.astype(float), (cnt >= 1).astype(float), (cnt >= k).astype(float)])
    res = solve_mip(c, M, np.array(sense, dtype=object), np.array(rhs), lb=lb, integer=integer, maximize=True, start=start, time_limit=clock.left, rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, guard=M.nnz > 20_000)
    clock.mark("mip")
    log.extend(res.log)
    best = greedy if greedy_ok else None
    best_val = g_k if greedy_ok else -math.inf
    if res.x is not None:
        xs = res.x[:m] > 0.5
        f1, fk = _values(mat, w, xs, k)
        feasible = f1 >= floor_w - 2 * tol and float(paid[xs].sum()) <= p and xs[kept].all()
        if feasible and fk > best_val + tol:
            best, best_val = np.flatnonzero(xs), fk
    if best is None:
        if res.status == "infeasible":
            log.append(f"no plan with {p} new sites covers {first_floor:.0%} of the coverable people at least once")
            return plan(kept, math.nan, math.nan, SolveStatus.INFEASIBLE)
        log.append("no plan meeting the first-coverage floor was found within the time limit")
        return plan(kept, math.nan, math.nan, SolveStatus.HEURISTIC)
    if violates_spacing(best, prep.pairs, m):  # pragma: no cover
        raise AssertionError("cover_twice: plan violates the spacing rule")
    count = reach.coverage_count(best)
    obj = float(reach.weight[count >= k].sum())
    params["first_covered_weight"] = float(reach.weight[count >= 1].sum())
    bound = W
    if math.isfinite(res.bound) and res.bound >= best_val - tol:
        bound = min(bound, res.bound)
    if res.status == "optimal":
        bound = min(bound, gap_widened(max(best_val, res.objective), rel_gap, maximize=True))
    bound = max(bound, obj)
    solver_optimal = res.status == "optimal" and best_val >= res.objective - tol
    if bound - obj <= tol or (bound - obj) / max(obj, 1e-9) <= rel_gap or solver_optimal:
        return plan(best, obj, obj if bound - obj <= tol else bound, SolveStatus.OPTIMAL)
    proven = math.isfinite(res.bound) and res.status in ("feasible", "nosolution", "optimal")
    return plan(best, obj, bound, SolveStatus.FEASIBLE if proven else SolveStatus.HEURISTIC)
