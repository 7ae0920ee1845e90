"""Location set covering (Toregas, Swain, ReVelle & Bergman 1971, Operations Research 19(6)).

Fewest sites (``use_cost=False``) or least total cost so that every
coverable demand row is covered.  Rows that no site reaches are left out of
the model and reported as uncoverable.
"""

from __future__ import annotations

import logging
import math
import time
from typing import Any

import numpy as np
import scipy.sparse as sp

from ..values import Plan, Reach, SolveStatus
from ._common import Clock, conflict_matrix, gap_widened, integral, kept_conflict, make_plan, prepare, spacing_rows, start_call, violates_spacing
from .greedy import greedy_cover, prune_cover
from .lagrange import lagrangian_cover
from .localsearch import cover_local_search
from .reduce import components, members, reduce_lscp
from .solver import solve_mip

logger = logging.getLogger(__name__)

__all__ = ["cover_all", "solve_cover_core"]

# components smaller than this are solved in-process (a fork costs more than the solve)
_GUARD_NNZ = 20_000
# local-search step budget: small instances get a short polish, large ones up to _LS_MAX_STEPS
_LS_MIN_STEPS = 2_000
_LS_MAX_STEPS = 300_000
_LAG_ITERATIONS = 10_000


def _ceil_bound(bound: float, costs_integral: bool) -> float:
    if costs_integral and math.isfinite(bound):
        return float(math.ceil(bound - 1e-6))
    return bound


def solve_cover_core(
    mat: sp.csr_matrix,
    cost: np.ndarray,
    conflicts: sp.csr_matrix | None,
    *,
    clock: Clock,
    time_limit: float,
    rel_gap: float,
    threads: int,
    seed: int,
    solver: str,
    log: list[str],
    use_lagrange: bool = True,
) -> tuple[np.ndarray | None, float, float, str]:
    """Solve one (reduced) set-covering instance: every row must be covered.

    Returns ``(chosen columns, objective, bound, status)`` with status one of
    "optimal", "feasible", "heuristic", "infeasible".
    """
    t_start = clock.elapsed
    n, m = mat.shape
    cost = np.asarray(cost, dtype=np.float64)
    ints = integral(cost)
    if n == 0:
        return np.zeros(0, dtype=np.int64), 0.0, 0.0, "optimal"
    # trivial bound: every row needs one of its columns
    row_min = np.minimum.reduceat(cost[mat.indices], mat.indptr[:-1]) if mat.nnz else np.zeros(n)
    bound = float(row_min.max())
    best: np.ndarray | None = greedy_cover(mat, cost, conflicts=conflicts)
    best_obj = math.inf
    if best is not None:
        best = prune_cover(mat, cost, best)
        best_obj = float(cost[best].sum())
        log.append(f"greedy + prune: {best_obj:g} ({len(best)} sites)")
    clock.mark("greedy")
    big = mat.nnz > _GUARD_NNZ

    def budget_left() -> float:
        return max(min(time_limit - (clock.elapsed - t_start), clock.left), 0.0)

    if not big:
        # small: CBC proves these in milliseconds; the heuristics below only run if it does not
        got = _mip_cover(mat, cost, conflicts, best, best_obj, bound, ints, time_limit=0.5 * budget_left(), rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, log=log, clock=clock)
        if got[3] in ("optimal", "infeasible"):
            return got
        best, best_obj, bound = got[0], got[1], max(bound, got[2]) if math.isfinite(got[2]) else bound

    if best is not None and conflicts is None and best_obj > bound + 1e-9:
        # row-weighting local search: a step budget keeps it deterministic, the deadline keeps it in time
        steps = int(min(_LS_MAX_STEPS, max(_LS_MIN_STEPS, mat.nnz))) if big else _LS_MIN_STEPS
        ls = cover_local_search(mat, cost, best, seed=seed, max_steps=steps, deadline=time.perf_counter() + (0.65 if big else 0.25) * budget_left(), target=bound)
        ls = prune_cover(mat, cost, ls)
        ls_obj = float(cost[ls].sum())
        clock.mark("local search")
        log.append(f"local search ({steps} steps max): {ls_obj:g}")
        if ls_obj < best_obj - 1e-9:
            best, best_obj = ls, ls_obj
    if use_lagrange and conflicts is None and n > 1 and best_obj > _ceil_bound(bound, ints) + 1e-9:
        # Lagrangian bound (Beasley 1990); on set covering its best value approaches the LP bound
        lag_bound, lag_plan = lagrangian_cover(
            mat, cost, upper=best_obj if math.isfinite(best_obj) else float(cost.sum()),
            iterations=_LAG_ITERATIONS, patience=300, f_min=1e-6, heuristic_every=200,
            deadline=time.perf_counter() + 0.25 * budget_left(),
        )
        clock.mark("lagrangian")
        if lag_plan is not None:
            lag_plan = prune_cover(mat, cost, lag_plan)
            lag_obj = float(cost[lag_plan].sum())
            if lag_obj < best_obj - 1e-9:
                best, best_obj = lag_plan, lag_obj
        bound = max(bound, lag_bound)
        log.append(f"lagrangian: bound {lag_bound:.6g}, best plan {best_obj:g}")
    bound = _ceil_bound(bound, ints)
    if best is not None and best_obj <= bound + 1e-9:
        return best, best_obj, best_obj, "optimal"
    return _mip_cover(mat, cost, conflicts, best, best_obj, bound, ints, time_limit=budget_left(), rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, log=log, clock=clock)


def _mip_cover(
    mat: sp.csr_matrix,
    cost: np.ndarray,
    conflicts: sp.csr_matrix | None,
    best: np.ndarray | None,
    best_obj: float,
    bound: float,
    ints: bool,
    *,
    time_limit: float,
    rel_gap: float,
    threads: int,
    seed: int,
    solver: str,
    log: list[str],
    clock: Clock,
) -> tuple[np.ndarray | None, float, float, str]:
    """The set-covering MIP warm-started with ``best``; returns the better of the two."""
    n, m = mat.shape
    left = time_limit
    # the MIP: min c x, A x >= 1, x_i + x_j <= 1 for spacing conflicts
    A = mat.astype(np.float64)
    sense = [b"G"] * n
    rhs = [1.0] * n
    P = spacing_rows(conflicts, m)
    if P.shape[0]:
        A = sp.vstack([A, P], format="csr")
        sense += [b"L"] * P.shape[0]
        rhs += [1.0] * P.shape[0]
    start = None
    if best is not None:
        start = np.zeros(m)
        start[best] = 1.0
    res = solve_mip(cost, A, np.array(sense, dtype=object), np.array(rhs), start=start, time_limit=left, rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, guard=A.nnz > _GUARD_NNZ)
    clock.mark("mip")
    log.extend(res.log)
    if res.status == "infeasible" and best is None:
        return None, math.nan, math.nan, "infeasible"
    mip_bound = res.bound if math.isfinite(res.bound) else -math.inf
    # a solver bound above a known cover is not a bound (e.g. reported before the root LP): ignore it
    if best is not None and mip_bound > best_obj + 1e-6 * max(1.0, abs(best_obj)):
        mip_bound = -math.inf
    if res.status == "optimal":
        mip_bound = max(mip_bound, gap_widened(res.objective, rel_gap, maximize=False))
    if res.status in ("optimal", "feasible"):
        mip_bound = min(mip_bound, res.objective)  # CBC reports the bound of the tree; never above the incumbent
    if res.x is not None:
        chosen = np.flatnonzero(res.x > 0.5)
        ok = bool((np.asarray(mat[:, chosen].sum(axis=1)).ravel() >= 1).all())
        if ok:
            chosen = prune_cover(mat, cost, chosen)
            obj = float(cost[chosen].sum())
            if obj < best_obj - 1e-9 or best is None:
                best, best_obj = chosen, obj
        else:  # pragma: no cover - a solver answer that does not cover is discarded
            log.append("solver plan does not cover every row; ignored")
    # "optimal" from the solver means within rel_gap: its objective is not a bound, the widened one is
    bound = _ceil_bound(max(bound, mip_bound), ints)
    if best is None:
        return None, math.nan, bound, "heuristic"
    gap = (best_obj - bound) / max(abs(best_obj), 1e-9)
    solver_optimal = res.status == "optimal" and best_obj <= res.objective + 1e-9 * max(1.0, abs(res.objective))
    if best_obj <= bound + 1e-9 or gap <= rel_gap or solver_optimal:
        return best, best_obj, bound, "optimal"
    return best, best_obj, bound, "feasible" if math.isfinite(bound) else "heuristic"


def cover_all(
    reach: Reach,
    *,
    use_cost: bool = True,
    time_limit: float = 60.0,
    rel_gap: float = 1e-4,
    threads: int = 1,
    seed: int = 0,
    solver: str = "cbc",
    reduce: bool = True,
) -> Plan:
    """LSCP: fewest sites or least cost so that every coverable demand row is covered.

    Parameters
    ----------
    reach : Reach
        The coverage relation; ``reach.role`` marks existing sites
        (``SiteRole.KEPT`` are forced open), ``reach.cost`` the opening costs
        and ``reach.close_pairs`` the pairs that may not both open.
    use_cost : bool
        Minimise total cost (True) or the number of sites (False).
    time_limit : float
        Seconds for the whole call, reductions and heuristics included; the
        solver is stopped from our side at the deadline.
    rel_gap : float
        Relative gap at which a plan counts as optimal.
    threads, seed : int
        Passed to the solver.
    solver : {"cbc", "highs"}
    reduce : bool
        Apply the exact reductions (dominated rows and columns, essential
        sites) before the solver.  Identical rows are always merged.

    Returns
    -------
    Plan
        ``model == "lscp"``; ``objective`` is the total cost (or count) of
        all sites in the plan, kept sites included; ``bound`` a proven lower
        bound on it.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> from geocover.values import Reach
    >>> r = Reach.from_sparse(sp.csr_matrix([[1, 1, 0], [0, 1, 1], [0, 0, 1]]))
    >>> p = cover_all(r, use_cost=False)
    >>> p.sites.tolist(), p.objective, p.status.value
    ([1, 2], 2.0, 'optimal')
    """
    reach, solver, clock, common = start_call(reach, time_limit=time_limit, rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, reduce=reduce)
    n, m = reach.shape
    prep = prepare(reach)
    cost = prep.cost if use_cost else np.ones(m)
    kept = np.flatnonzero(prep.kept)
    params: dict[str, Any] = {"use_cost": bool(use_cost), **common}
    log: list[str] = []

    def plan(sites: np.ndarray, obj: float, bound: float, status: SolveStatus) -> Plan:
        return make_plan(reach, sites, model="lscp", objective=obj, bound=bound, status=status, solver=solver, clock=clock, params=params, log=log)

    if kept_conflict(reach):
        log.append("two kept sites are closer than the minimum spacing")
        return plan(kept, math.nan, math.nan, SolveStatus.INFEASIBLE)
    if prep.pattern.shape[0] == 0 or m == 0:
        log.append("no demand can be reached by any site")
        c0 = float(cost[kept].sum())
        return plan(kept, c0, c0, SolveStatus.EMPTY)
    # reductions may use up to a third of the time limit
    core = reduce_lscp(prep.pattern, cost, fixed_open=kept, close_pairs=prep.pairs, rules=reduce, deadline=clock.t0 + clock.limit / 3.0)
    clock.mark("reduce")
    params["reduction"] = core.stats
    for s in core.stats:
        log.append("reduce: " + ", ".join(f"{k}={v:.3g}" if isinstance(v, float) else f"{k}={v}" for k, v in s.items()))
    if core.infeasible:
        log.append("some coverable demand loses every site once the spacing rule is applied")
        return plan(core.fixed, math.nan, math.nan, SolveStatus.INFEASIBLE)
    fixed_cost = float(cost[core.fixed].sum())
    chosen = [core.fixed]
    conf_all = None
    if len(prep.pairs):
        local = -np.ones(m, dtype=np.int64)
        local[core.columns] = np.arange(len(core.columns))
        lp = local[prep.pairs]
        lp = lp[(lp >= 0).all(axis=1)]
        if len(lp):
            conf_all = conflict_matrix(lp, len(core.columns))
    ncomp, row_lab, col_lab = components(core.matrix, conf_all)
    params["components"] = int(ncomp)
    total_obj = fixed_cost
    total_bound = fixed_cost
    statuses: list[str] = []
    mat = core.matrix
    if ncomp:
        # process components in order; each gets time in proportion to its size
        sizes = np.bincount(row_lab, weights=np.diff(mat.indptr), minlength=ncomp) + 1.0
        row_sets, col_sets = members(row_lab, ncomp), members(col_lab, ncomp)
        remaining = float(sizes.sum())
        for c in range(ncomp):
            rows, cols = row_sets[c], col_sets[c]
            if len(rows) == 0:
                remaining -= sizes[c]
                continue
            sub = mat[rows][:, cols]
            sub.sort_indices()
            conf = conf_all[cols][:, cols] if conf_all is not None else None
            share = max(clock.left, 0.0) * sizes[c] / max(remaining, 1.0)
            remaining -= sizes[c]
            sel, obj, bnd, st = solve_cover_core(sub, core.cost[cols], conf if conf is not None and conf.nnz else None, clock=clock, time_limit=share, rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, log=log)
            statuses.append(st)
            if sel is None:
                if st == "infeasible":
                    log.append("the spacing rule leaves no way to cover every coverable demand row")
                    return plan(np.concatenate(chosen), math.nan, math.nan, SolveStatus.INFEASIBLE)
                log.append("no cover satisfying the spacing rule was found within the time limit")
                return plan(np.concatenate(chosen), math.nan, math.nan, SolveStatus.HEURISTIC)
            chosen.append(core.columns[cols[sel]])
            total_obj += obj
            total_bound += bnd
    sites = np.unique(np.concatenate(chosen))
    # check on the original relation: every coverable row is covered, spacing holds
    count = reach.coverage_count(sites)
    if not (count[prep.rows] > 0).all():  # pragma: no cover - would be a reduction bug
        raise AssertionError("cover_all: plan leaves coverable demand uncovered")
    if violates_spacing(sites, prep.pairs, m):  # pragma: no cover
        raise AssertionError("cover_all: plan violates the spacing rule")
    obj = float(cost[sites].sum())
    if all(s == "optimal" for s in statuses):
        status = SolveStatus.OPTIMAL
        # components optimal within rel_gap prove only the summed bound; snap rounding noise, not the gap
        total_bound = obj if total_bound >= obj - 1e-6 * max(1.0, obj) else total_bound
    elif any(s == "heuristic" for s in statuses) and not math.isfinite(total_bound):
        status = SolveStatus.HEURISTIC
    else:
        status = SolveStatus.FEASIBLE
    return plan(sites, obj, min(total_bound, obj), status)
