"""Coverage target: least cost so that at least a given share of the coverable people is covered."""

from __future__ import annotations

import logging
import math
from typing import Any

import numpy as np
import scipy.sparse as sp

from ..errors import ParameterError
from ..values import Plan, Reach, SiteRole, SolveStatus
from ._common import gap_widened, integral, kept_conflict, make_plan, spacing_rows, start_call, violates_spacing
from .greedy import covered_weight, greedy_cover
from .mclp import build_most_core
from .solver import solve_mip

logger = logging.getLogger(__name__)

__all__ = ["cover_target"]


def _greedy_target(mat: sp.csr_matrix, w: np.ndarray, cost: np.ndarray, need: float, conflicts: sp.csr_matrix | None) -> np.ndarray | None:
    """Open sites by weight gained per unit cost until ``need`` is met, then drop the redundant ones."""
    chosen = greedy_cover(mat, cost, conflicts=conflicts, weight=w, need=need)
    if chosen is None:
        return None
    # prune: most expensive first (ties: highest index), keep the target
    sel = chosen
    for j in sel[np.lexsort((-sel, -cost[sel]))]:
        trial = sel[sel != j]
        if covered_weight(mat, w, trial) >= need:
            sel = trial
    return sel


def cover_target(
    reach: Reach,
    share: float,
    *,
    use_cost: bool = True,
    time_limit: float = 60.0,
    rel_gap: float = 1e-4,
    threads: int = 1,
    seed: int = 0,
    solver: str = "cbc",
    reduce: bool = True,
) -> Plan:
    """Least cost (or fewest sites) so that covered weight >= ``share`` x coverable weight.

    Parameters
    ----------
    reach : Reach
    share : float
        In (0, 1]; the share of the *coverable* people (people no site can
        reach are left out of both sides).  1 gives the LSCP optimum.
    use_cost, time_limit, rel_gap, threads, seed, solver, reduce
        As for :func:`cover_all`; ``reduce`` drops dominated columns
        (a superset of rows at no higher cost), valid here since weights are
        non-negative.

    Returns
    -------
    Plan
        ``model == "target"``; objective is the plan's total cost (or count),
        kept sites included.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> from geocover.values import Reach
    >>> r = Reach.from_sparse(sp.csr_matrix([[1, 0], [0, 1]]), weight=[95, 5], cost=[3, 1])
    >>> cover_target(r, 0.9).sites.tolist()
    [0]
    """
    reach, solver, clock, common = start_call(reach, time_limit=time_limit, rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, reduce=reduce)
    if isinstance(share, bool) or not isinstance(share, (int, float, np.floating)) or not (0 < float(share) <= 1):
        raise ParameterError(f"share: must be a fraction in (0, 1] of the coverable people, got {share!r} (write 95 % as 0.95)", param="share")
    share = float(share)
    m = reach.shape[1]
    cost_all = np.asarray(reach.cost, dtype=np.float64) if use_cost else np.ones(m)
    params: dict[str, Any] = {"share": share, "use_cost": bool(use_cost), **common}
    log: list[str] = []

    def plan(sites: np.ndarray, obj: float, bound: float, status: SolveStatus) -> Plan:
        return make_plan(reach, sites, model="target", objective=obj, bound=bound, status=status, solver=solver, clock=clock, params=params, log=log)

    kept = np.flatnonzero(np.asarray(reach.role) == SiteRole.KEPT)
    if kept_conflict(reach):
        log.append("two kept sites are closer than the minimum spacing")
        return plan(kept, math.nan, math.nan, SolveStatus.INFEASIBLE)
    if not reach.coverable.any():
        log.append("no demand can be reached by any site")
        c0 = float(cost_all[kept].sum())
        return plan(kept, c0, c0, SolveStatus.EMPTY)
    core = build_most_core(reach, resource="cost", reduce=reduce, optional_free=False, unit_cost=not use_cost, deadline=clock.t0 + clock.limit / 3.0)
    clock.mark("reduce")
    params["reduction"] = core.stats
    coverable_w = core.coverable_weight
    need_total = share * coverable_w
    need = need_total - core.fixed_weight
    params["target_weight"] = need_total
    fixed_cost = float(cost_all[core.fixed].sum())
    tol = 1e-9 * max(coverable_w, 1.0)
    if need <= tol:
        return plan(core.fixed, fixed_cost, fixed_cost, SolveStatus.OPTIMAL)
    mat, w, cost = core.matrix, core.weight, core.cost
    n, mc = mat.shape
    if float(w.sum()) < need - tol:
        log.append("the target cannot be met: the spacing rule with kept sites leaves too little demand reachable")
        return plan(core.fixed, math.nan, math.nan, SolveStatus.INFEASIBLE)
    need_eff = need - tol
    best = _greedy_target(mat, w, cost, need_eff, core.conflicts)
    best_obj = float(cost[best].sum()) if best is not None else math.inf
    clock.mark("greedy")
    lower = 0.0
    # MIP: min c x;  A x - y >= 0;  w y >= need;  spacing;  x binary, 0 <= y <= 1
    A = sp.hstack([mat.astype(np.float64), -sp.identity(n, format="csr")], format="csr")
    blocks = [A, sp.csr_matrix(np.concatenate([np.zeros(mc), w])[None, :])]
    sense = [b"G"] * n + [b"G"]
    rhs = [0.0] * n + [need_eff]
    blocks.append(spacing_rows(core.conflicts, mc + n))
    sense += [b"L"] * blocks[-1].shape[0]
    rhs += [1.0] * blocks[-1].shape[0]
    M = sp.vstack(blocks, format="csr")
    start = None
    if best is not None:
        start = np.zeros(mc + n)
        start[best] = 1.0
        start[mc:] = (np.asarray(mat[:, best].sum(axis=1)).ravel() > 0).astype(float)
    integer = np.concatenate([np.ones(mc, dtype=bool), np.zeros(n, dtype=bool)])
    res = solve_mip(np.concatenate([cost, np.zeros(n)]), M, np.array(sense, dtype=object), np.array(rhs), integer=integer, start=start, time_limit=clock.left, rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, guard=M.nnz > 20_000)
    clock.mark("mip")
    log.extend(res.log)
    if res.x is not None:
        sel = np.flatnonzero(res.x[:mc] > 0.5)
        if covered_weight(mat, w, sel) >= need_eff - tol:
            obj = float(cost[sel].sum())
            if obj < best_obj - 1e-9:
                best, best_obj = sel, obj
    if res.status == "infeasible" and best is None:
        return plan(core.fixed, math.nan, math.nan, SolveStatus.INFEASIBLE)
    if best is None:
        return plan(core.fixed, math.nan, math.nan, SolveStatus.HEURISTIC)
    # a solver bound above a known feasible plan is not a bound (e.g. reported before the root LP): ignore it
    if math.isfinite(res.bound) and res.bound <= best_obj + 1e-6 * max(1.0, abs(best_obj)):
        lower = max(lower, res.bound)
    if res.status == "optimal":
        lower = max(lower, gap_widened(min(best_obj, res.objective), rel_gap, maximize=False))
    solver_optimal = res.status == "optimal" and best_obj <= res.objective + 1e-9 * max(1.0, abs(res.objective))
    if integral(cost) and math.isfinite(lower):
        lower = math.ceil(lower - 1e-6)
    sites = np.union1d(core.fixed, core.columns[best])
    got = float(reach.weight[reach.coverage_count(sites) > 0].sum())
    if got < need_total - 2 * tol:  # pragma: no cover - bookkeeping bug
        raise AssertionError(f"cover_target: plan covers {got}, target {need_total}")
    if violates_spacing(sites, np.asarray(reach.close_pairs).reshape(-1, 2), m):  # pragma: no cover
        raise AssertionError("cover_target: plan violates the spacing rule")
    obj = float(cost_all[sites].sum())
    bound = min(obj, fixed_cost + lower)
    if obj - bound <= 1e-9 * max(obj, 1.0) or (obj - bound) / max(obj, 1e-9) <= rel_gap or solver_optimal:
        return plan(sites, obj, obj if obj - bound <= 1e-9 * max(obj, 1.0) else bound, SolveStatus.OPTIMAL)
    return plan(sites, obj, bound, SolveStatus.FEASIBLE if math.isfinite(res.bound) else SolveStatus.HEURISTIC)
