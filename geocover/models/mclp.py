"""Maximal covering (Church & ReVelle 1974, Papers of the Regional Science Association 32).

At most ``sites`` new sites, or a budget on cost, maximising the people
covered.  Existing sites: ``KEPT`` are open and do not count toward
``sites``; ``OPTIONAL`` existing sites cost 0 and do not count toward
``sites`` either (the model opens them when they add coverage); the budget
counts the cost of kept sites.
"""

from __future__ import annotations

import logging
import math
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.sparse as sp

from ..errors import ParameterError
from ..values import Plan, Reach, SiteRole, SolveStatus
from ._common import Clock, conflict_matrix, gap_widened, kept_conflict, make_plan, prepare, spacing_rows, start_call, violates_spacing
from .greedy import covered_weight, greedy_most, iterated_swap, swap_most
from .lagrange import lagrangian_most
from .reduce import components, dominated_columns, members, merge_rows
from .solver import solve_mip

logger = logging.getLogger(__name__)

__all__ = ["cover_most", "MostCore", "build_most_core", "solve_most_core", "most_curve", "combine_curves"]

_GUARD_NNZ = 20_000
_ILS_ITERATIONS = 40
# component DP: only when every component is small (its MIPs take milliseconds) and the curves are short
_DP_MAX_SOLVES = 2_000
_DP_SMALL_NNZ = 5_000


@dataclass
class MostCore:
    """A weighted covering instance after the exact (weighted-valid) reductions."""

    matrix: sp.csr_matrix  #: merged rows not covered by kept sites x free columns
    weight: np.ndarray
    columns: np.ndarray  #: original site index of each column
    paid: np.ndarray  #: bool: counts toward p (candidates); False for optional existing
    cost: np.ndarray  #: opening cost (0 for optional)
    conflicts: sp.csr_matrix | None
    fixed: np.ndarray  #: original indices of kept sites
    fixed_weight: float  #: weight covered by the kept sites
    coverable_weight: float
    stats: list[dict[str, Any]] = field(default_factory=list)


def build_most_core(reach: Reach, *, resource: str, reduce: bool, allow_dominance: bool = True, optional_free: bool = True, unit_cost: bool = False, deadline: float | None = None) -> MostCore:
    """Take kept sites out, merge identical rows, drop dominated columns.

    ``resource`` is "count" (dominance needs a column that counts no more
    toward p) or "cost" (no more expensive).  Column dominance is valid for
    maximal covering and coverage targets because weights are non-negative:
    replacing a column by one that covers a superset at no more resource
    never loses weight.  It is skipped for backup coverage.
    ``optional_free`` prices optional existing sites at 0 (MCLP); otherwise
    they keep their cost (coverage targets, like LSCP).  ``unit_cost``
    prices every site at 1 (fewest sites).
    """
    prep = prepare(reach)
    m = reach.shape[1]
    pat = prep.pattern
    kept = np.flatnonzero(prep.kept)
    x = np.zeros(m, dtype=np.int8)
    x[kept] = 1
    by_kept = np.asarray(pat @ x).ravel() > 0 if pat.shape[0] else np.zeros(0, dtype=bool)
    fixed_weight = float(prep.weight[by_kept].sum())
    stats: list[dict[str, Any]] = [{"step": "coverable rows", "rows": int(pat.shape[0]), "columns": m, "nnz": int(pat.nnz)}]
    alive = ~prep.kept
    pairs = prep.pairs
    if len(pairs):
        kp = prep.kept[pairs[:, 0]] | prep.kept[pairs[:, 1]]
        partners = np.concatenate([pairs[prep.kept[pairs[:, 0]], 1], pairs[prep.kept[pairs[:, 1]], 0]])
        alive[partners] = False
        pairs = pairs[~kp]
    rows = ~by_kept
    sub = pat[rows]
    w = prep.weight[rows]
    sub, w, _ = merge_rows(sub, w)
    stats.append({"step": "merge identical rows", "rows": int(sub.shape[0]), "nnz": int(sub.nnz)})
    base = np.ones(m) if unit_cost else prep.cost
    cost = np.where(prep.optional, 0.0, base) if optional_free else base.copy()
    paid = ~prep.optional if optional_free else np.ones(m, dtype=bool)
    if reduce and allow_dominance and sub.shape[0]:
        in_pair = np.zeros(m, dtype=bool)
        in_pair[pairs.ravel()] = True
        res = paid.astype(np.float64) if resource == "count" else cost
        # drop dead columns before the dominance test so they cannot dominate
        live_sub = sub[:, np.flatnonzero(alive)]
        dead_local = dominated_columns(live_sub, res[alive], can_dominate=~in_pair[alive], deadline=deadline)
        alive_idx = np.flatnonzero(alive)
        alive[alive_idx[dead_local]] = False
        stats.append({"step": "dominated columns", "columns": int(alive.sum())})
    nz = w > 0
    sub = sub[nz]
    w = w[nz]
    used = np.zeros(m, dtype=bool)
    used[sub.indices] = True
    cols = np.flatnonzero(used & alive)
    sub = sub[:, cols]
    sub.sort_indices()
    # rows that lost all columns (only possible through spacing with kept sites) cannot be covered any more
    has = np.diff(sub.indptr) > 0
    sub = sub[has]
    w = w[has]
    conf = None
    if len(pairs):
        local = -np.ones(m, dtype=np.int64)
        local[cols] = np.arange(len(cols))
        lp = local[pairs]
        lp = lp[(lp >= 0).all(axis=1)]
        if len(lp):
            conf = conflict_matrix(lp, len(cols))
    stats.append({"step": "reduced", "rows": int(sub.shape[0]), "columns": int(len(cols)), "nnz": int(sub.nnz)})
    return MostCore(sub, w, cols, paid[cols], cost[cols], conf, kept, fixed_weight, float(prep.weight.sum()), stats)


def _upper_bound(mat: sp.csr_matrix, w: np.ndarray, res: np.ndarray, cap: float, count_model: bool) -> float:
    """A cheap valid upper bound: free columns plus the best `cap` paid column weights."""
    gain = np.asarray(sp.csc_matrix(mat).T @ w).ravel() if mat.shape[0] else np.zeros(mat.shape[1])
    free = res <= 0
    total = float(w.sum())
    if count_model:
        paid_gain = np.sort(gain[~free])[::-1][: int(cap)]
        ub = float(gain[free].sum() + paid_gain.sum())
    else:  # fractional knapsack on the gains
        order = np.argsort(-gain[~free] / np.maximum(res[~free], 1e-12), kind="stable")
        g = gain[~free][order]
        r = res[~free][order]
        left = cap
        ub = float(gain[free].sum())
        for gi, ri in zip(g, r):
            if left <= 0:
                break
            take = 1.0 if ri <= left else left / ri
            ub += take * gi
            left -= take * ri
    return min(total, ub)


def solve_most_core(
    mat: sp.csr_matrix,
    w: np.ndarray,
    res: np.ndarray,
    cap: float,
    conflicts: sp.csr_matrix | None,
    *,
    count_model: bool,
    clock: Clock,
    time_limit: float,
    rel_gap: float,
    threads: int,
    seed: int,
    solver: str,
    log: list[str],
    start: np.ndarray | None = None,
) -> tuple[np.ndarray, float, float, str]:
    """Maximise covered weight with ``res @ x <= cap``.  Returns (columns, value, bound, status)."""
    n, m = mat.shape
    w = np.asarray(w, dtype=np.float64)
    total = float(w.sum())
    if n == 0 or m == 0:
        return np.zeros(0, dtype=np.int64), 0.0, 0.0, "optimal"
    kw: dict[str, Any] = {"sites": int(cap)} if count_model else {"budget": float(cap)}
    best = greedy_most(mat, w, resource=res, conflicts=conflicts, **kw)
    best_val = covered_weight(mat, w, best)
    if start is not None:
        sv = covered_weight(mat, w, start)
        if sv > best_val:
            best, best_val = np.asarray(start, dtype=np.int64), sv
    log.append(f"greedy: {best_val:.6g}")
    if best_val < total - 1e-9 * max(total, 1.0):
        best = swap_most(mat, w, best, resource=res, budget=None if count_model else float(cap), conflicts=conflicts, deadline=clock.t0 + clock.elapsed + 0.2 * max(min(time_limit, clock.left), 0.0))
        best_val = covered_weight(mat, w, best)
        log.append(f"swap: {best_val:.6g}")
        if count_model and conflicts is None and m > cap > 0:
            ils = iterated_swap(mat, w, best, sites=int(cap), resource=res, seed=seed, iterations=_ILS_ITERATIONS, deadline=time.perf_counter() + 0.1 * max(min(time_limit, clock.left), 0.0))
            ils_val = covered_weight(mat, w, ils)
            if ils_val > best_val:
                best, best_val = ils, ils_val
            log.append(f"iterated swap ({_ILS_ITERATIONS} kicks max): {best_val:.6g}")
    clock.mark("greedy")
    ub = _upper_bound(mat, w, res, cap, count_model) if conflicts is None else total
    tol = 1e-9 * max(total, 1.0)
    if best_val >= ub - tol:
        return best, best_val, best_val, "optimal"
    if count_model and conflicts is None and n > 1:
        big = mat.nnz > _GUARD_NNZ  # large: CBC may not finish its root LP, so the Lagrangian bound is what we report
        lag = lagrangian_most(mat, w, res > 0, int(cap), lower=best_val, iterations=4000 if big else 1500, deadline=time.perf_counter() + (0.15 if big else 0.05) * max(min(time_limit, clock.left), 0.0))
        clock.mark("lagrangian")
        log.append(f"lagrangian bound: {lag:.6g}")
        ub = min(ub, max(lag, best_val))
        if best_val >= ub - tol or (ub - best_val) / max(best_val, 1e-9) <= rel_gap:
            return best, best_val, ub if ub - best_val > tol else best_val, "optimal"
    left = min(time_limit, clock.left)
    # MIP: max w y; A x - y >= 0; res x <= cap; x_i + x_j <= 1 for conflicts; x binary, 0 <= y <= 1
    A = sp.hstack([mat.astype(np.float64), -sp.identity(n, format="csr")], format="csr")
    R = sp.csr_matrix(np.concatenate([res, np.zeros(n)])[None, :])
    blocks = [A, R]
    sense = [b"G"] * n + [b"L"]
    rhs = [0.0] * n + [float(cap)]
    blocks.append(spacing_rows(conflicts, m + n))
    sense += [b"L"] * blocks[-1].shape[0]
    rhs += [1.0] * blocks[-1].shape[0]
    M = sp.vstack(blocks, format="csr")
    c = np.concatenate([np.zeros(m), w])
    integer = np.concatenate([np.ones(m, dtype=bool), np.zeros(n, dtype=bool)])
    st = np.zeros(m + n)
    st[best] = 1.0
    st[m:] = (np.asarray(mat[:, best].sum(axis=1)).ravel() > 0).astype(float)
    r = solve_mip(c, M, np.array(sense, dtype=object), np.array(rhs), integer=integer, maximize=True, start=st, time_limit=left, rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, guard=M.nnz > _GUARD_NNZ)
    clock.mark("mip")
    log.extend(r.log)
    bound = ub
    # a solver bound below a known feasible plan is not a bound (e.g. reported before the root LP): ignore it
    valid_bound = math.isfinite(r.bound) and r.status in ("optimal", "feasible", "nosolution") and r.bound >= best_val - tol
    if valid_bound:
        bound = min(bound, r.bound)
    if r.x is not None:
        chosen = np.flatnonzero(r.x[:m] > 0.5)
        feasible = float(res[chosen].sum()) <= cap + 1e-9 and not (conflicts is not None and conflicts.nnz and (conflicts[chosen][:, chosen].nnz > 0))
        if feasible:
            val = covered_weight(mat, w, chosen)
            if val > best_val + tol:
                best, best_val = chosen, val
    if r.status == "optimal":
        bound = min(bound, gap_widened(max(best_val, r.objective), rel_gap, maximize=True))
    bound = max(bound, best_val)
    solver_optimal = r.status == "optimal" and best_val >= r.objective - tol
    if best_val >= bound - tol or (bound - best_val) / max(best_val, 1e-9) <= rel_gap or solver_optimal:
        return best, best_val, bound, "optimal"
    proven = valid_bound
    return best, best_val, bound, "feasible" if proven or bound < total - tol else "heuristic"


def most_curve(
    mat: sp.csr_matrix,
    w: np.ndarray,
    paid: np.ndarray,
    conflicts: sp.csr_matrix | None,
    max_p: int,
    **kw: Any,
) -> tuple[np.ndarray, np.ndarray, list[np.ndarray], list[str]]:
    """Optimal covered weight for q = 0..max_p paid sites on one instance.

    Stops early once everything is covered (the curve is flat after that).
    """
    res = paid.astype(np.float64)
    total = float(np.asarray(w).sum())
    vals = np.zeros(max_p + 1)
    bnds = np.zeros(max_p + 1)
    plans: list[np.ndarray] = []
    stats: list[str] = []
    prev: np.ndarray | None = None
    for q in range(max_p + 1):
        if q and prev is not None and vals[q - 1] >= total - 1e-9 * max(total, 1.0):
            vals[q] = vals[q - 1]
            bnds[q] = bnds[q - 1]
            plans.append(plans[-1])
            stats.append(stats[-1])
            continue
        sel, v, b, s = solve_most_core(mat, w, res, float(q), conflicts, count_model=True, start=prev, **kw)
        vals[q], bnds[q] = v, b
        plans.append(sel)
        stats.append(s)
        prev = sel
    return vals, bnds, plans, stats


def combine_curves(curves: list[np.ndarray], p: int) -> tuple[float, list[int]]:
    """Exact max-plus combination of per-component curves by dynamic programming.

    ``curves[c][q]`` is the best value of component c with q sites
    (non-decreasing in q).  Returns the best total with at most ``p`` sites
    and the number of sites given to each component (ties: fewer sites to
    earlier components).
    """
    best = np.zeros(p + 1)
    choice: list[np.ndarray] = []
    for f in curves:
        qmax = len(f) - 1
        new = np.full(p + 1, -np.inf)
        arg = np.zeros(p + 1, dtype=np.int64)
        for q in range(min(qmax, p) + 1):
            cand = np.full(p + 1, -np.inf)
            cand[q:] = best[: p + 1 - q] + f[q]
            better = cand > new + 1e-12
            new = np.where(better, cand, new)
            arg = np.where(better, q, arg)
        best = new
        choice.append(arg)
    # walk back
    alloc = [0] * len(curves)
    budget = int(np.argmax(best)) if len(curves) else 0
    for c in range(len(curves) - 1, -1, -1):
        q = int(choice[c][budget])
        alloc[c] = q
        budget -= q
    return float(best.max()) if len(curves) else 0.0, alloc


def check_sites(sites: Any, reach: Reach, name: str = "sites") -> int:
    n_cand = int((np.asarray(reach.role) == SiteRole.CANDIDATE).sum())
    if isinstance(sites, bool) or not isinstance(sites, (int, np.integer)):
        raise ParameterError(f"{name}: must be a whole number of new sites, got {sites!r}", param=name)
    if sites < 0:
        raise ParameterError(f"{name}: must be 0 or more, got {sites}", param=name)
    if sites > n_cand:
        raise ParameterError(f"{name}: {sites} new sites asked for but there are only {n_cand} candidate sites; use at most {n_cand}", param=name)
    return int(sites)


def cover_most(
    reach: Reach,
    *,
    sites: int | None = None,
    budget: float | None = None,
    time_limit: float = 60.0,
    rel_gap: float = 1e-4,
    threads: int = 1,
    seed: int = 0,
    solver: str = "cbc",
    reduce: bool = True,
) -> Plan:
    """MCLP: at most ``sites`` new sites (or a ``budget``), maximising people covered.

    Parameters
    ----------
    reach : Reach
    sites : int, optional
        Number of new (candidate) sites.  Kept sites are open on top; an
        optional existing site costs 0 and does not count toward ``sites``.
    budget : float, optional
        Upper limit on the total cost of the plan, kept sites included
        (optional existing sites cost 0).  Give exactly one of ``sites`` and
        ``budget``.
    time_limit, rel_gap, threads, seed, solver, reduce
        As for :func:`cover_all`.  ``reduce`` drops dominated columns; with
        ``sites`` and several independent components, the components are
        solved apart and combined exactly by dynamic programming.

    Returns
    -------
    Plan
        ``model == "mclp"``; ``objective`` is the covered weight (people),
        kept sites' coverage included; ``bound`` a proven upper bound.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> from geocover.values import Reach
    >>> r = Reach.from_sparse(sp.csr_matrix([[1, 0, 0], [1, 1, 0], [0, 1, 1], [0, 0, 1]]), weight=[5, 1, 1, 4])
    >>> p = cover_most(r, sites=1)
    >>> p.sites.tolist(), p.objective
    ([0], 6.0)
    """
    reach, solver, clock, common = start_call(reach, time_limit=time_limit, rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, reduce=reduce)
    if (sites is None) == (budget is None):
        raise ParameterError("cover_most: give exactly one of sites= (number of new sites) or budget= (total cost)", param="sites" if sites is None else "budget")
    kept = np.asarray(reach.role) == SiteRole.KEPT
    kept_cost = float(np.asarray(reach.cost)[kept].sum())
    if sites is not None:
        p = check_sites(sites, reach)
    else:
        if isinstance(budget, bool) or not isinstance(budget, (int, float, np.floating, np.integer)) or not math.isfinite(float(budget)):
            raise ParameterError(f"budget: must be a finite number, got {budget!r}", param="budget")
        if float(budget) < kept_cost - 1e-9:
            raise ParameterError(f"budget: {budget:g} is below the cost of the kept sites ({kept_cost:g}); raise it to at least {kept_cost:g}", param="budget")
    params: dict[str, Any] = {"sites": sites, "budget": budget, **common}
    log: list[str] = []

    def plan(chosen: np.ndarray, obj: float, bound: float, status: SolveStatus) -> Plan:
        return make_plan(reach, chosen, model="mclp", objective=obj, bound=bound, status=status, solver=solver, clock=clock, params=params, log=log)

    kept_idx = np.flatnonzero(kept)
    if kept_conflict(reach):
        log.append("two kept sites are closer than the minimum spacing")
        return plan(kept_idx, math.nan, math.nan, SolveStatus.INFEASIBLE)
    if reach.shape[0] == 0 or not reach.coverable.any():
        log.append("no demand can be reached by any site")
        return plan(kept_idx, 0.0, 0.0, SolveStatus.EMPTY)
    count_model = sites is not None
    core = build_most_core(reach, resource="count" if count_model else "cost", reduce=reduce, deadline=clock.t0 + clock.limit / 3.0)
    clock.mark("reduce")
    params["reduction"] = core.stats
    res = core.paid.astype(np.float64) if count_model else core.cost
    cap = float(p) if count_model else float(budget) - kept_cost  # type: ignore[arg-type]
    kw = dict(clock=clock, rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, log=log)
    mat, w = core.matrix, core.weight
    ncomp, row_lab, col_lab = components(mat, core.conflicts) if mat.shape[0] else (0, np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64))
    params["components"] = int(ncomp)
    use_dp = False
    if reduce and count_model and ncomp > 1:
        # the exact DP needs each component's curve up to p; worth it when that is a modest number of small solves
        paid_per = np.bincount(col_lab, weights=core.paid.astype(float), minlength=ncomp)
        nnz_per = np.bincount(row_lab, weights=np.diff(mat.indptr), minlength=ncomp)
        solves = float(np.minimum(paid_per, p).sum() + ncomp)
        use_dp = bool((nnz_per <= _DP_SMALL_NNZ).all()) and solves <= _DP_MAX_SOLVES
        params["component_dp"] = bool(use_dp)
    if use_dp:
        chosen_local, val, bnd, status = _solve_by_components(mat, w, core.paid, core.conflicts, p, ncomp, row_lab, col_lab, kw)
        # per-component points cut short by the clock could add up to less than one greedy run on the whole
        greedy = greedy_most(mat, w, sites=p, resource=res, conflicts=core.conflicts)
        greedy_val = covered_weight(mat, w, greedy)
        if greedy_val > val + 1e-9 * max(val, 1.0):
            log.append(f"components: greedy on the whole instance ({greedy_val:.6g}) beat the combined curves ({val:.6g})")
            chosen_local, val = greedy, greedy_val
    else:
        chosen_local, val, bnd, status = solve_most_core(mat, w, res, cap, core.conflicts, count_model=count_model, time_limit=clock.left, **kw)
    chosen = np.union1d(core.fixed, core.columns[chosen_local])
    chosen = _drop_idle(reach, chosen, kept)
    obj = float(reach.weight[reach.coverage_count(chosen) > 0].sum())
    if abs(obj - (val + core.fixed_weight)) > 1e-6 * max(1.0, obj):  # pragma: no cover - bookkeeping bug
        raise AssertionError(f"cover_most: covered weight {obj} differs from the model value {val + core.fixed_weight}")
    if violates_spacing(chosen, np.asarray(reach.close_pairs).reshape(-1, 2), reach.shape[1]):  # pragma: no cover
        raise AssertionError("cover_most: plan violates the spacing rule")
    bound = max(obj, bnd + core.fixed_weight)
    st = {"optimal": SolveStatus.OPTIMAL, "feasible": SolveStatus.FEASIBLE, "heuristic": SolveStatus.HEURISTIC}[status]
    if st == SolveStatus.OPTIMAL:
        bound = obj if (bound - obj) <= 1e-9 * max(obj, 1.0) else bound
    return plan(chosen, obj, bound, st)


def _drop_idle(reach: Reach, chosen: np.ndarray, kept: np.ndarray, pattern_csc: sp.csc_matrix | None = None) -> np.ndarray:
    """Remove non-kept sites that add no coverage (highest index first)."""
    chosen = np.asarray(chosen, dtype=np.int64)
    if len(chosen) == 0:
        return chosen
    pat = reach.pattern.tocsc() if pattern_csc is None else pattern_csc
    cnt = reach.coverage_count(chosen)
    w = reach.weight
    keep = np.ones(len(chosen), dtype=bool)
    for a in range(len(chosen) - 1, -1, -1):
        j = chosen[a]
        if kept[j]:
            continue
        rows = pat.indices[pat.indptr[j] : pat.indptr[j + 1]]
        if not (w[rows][cnt[rows] == 1] > 0).any():
            cnt[rows] -= 1
            keep[a] = False
    return chosen[keep]


def _solve_by_components(mat, w, paid, conflicts, p, ncomp, row_lab, col_lab, kw):
    """Per-component trade-off curves combined exactly by dynamic programming."""
    clock: Clock = kw["clock"]
    log: list[str] = kw["log"]
    row_sets, col_sets = members(row_lab, ncomp), members(col_lab, ncomp)
    sizes = np.bincount(row_lab, weights=np.diff(mat.indptr), minlength=ncomp) + 1.0
    remaining = float(sizes.sum())
    curves, bounds, plans, cols_list, statuses = [], [], [], [], []
    for c in range(ncomp):
        rows, cols = row_sets[c], col_sets[c]
        share = max(clock.left, 0.0) * sizes[c] / max(remaining, 1.0)
        remaining -= sizes[c]
        if len(rows) == 0:
            continue
        sub = mat[rows][:, cols]
        sub.sort_indices()
        conf = conflicts[cols][:, cols] if conflicts is not None else None
        qmax = int(min(p, paid[cols].sum()))
        sub_clock_limit = share / (qmax + 1)
        ckw = dict(kw)
        ckw["time_limit"] = sub_clock_limit
        vals, bnds, pl, st = most_curve(sub, w[rows], paid[cols], conf if conf is not None and conf.nnz else None, qmax, **ckw)
        curves.append(vals)
        bounds.append(bnds)
        plans.append(pl)
        cols_list.append(cols)
        statuses.extend(st)
    val, alloc = combine_curves(curves, p)
    ub, _ = combine_curves([np.minimum.accumulate(b[::-1])[::-1] for b in bounds], p)  # f(q) <= bound(q') for q' >= q
    chosen = [cols_list[c][plans[c][q]] for c, q in enumerate(alloc)]
    chosen_all = np.concatenate(chosen) if chosen else np.zeros(0, dtype=np.int64)
    log.append(f"components: {len(curves)} solved apart, combined by dynamic programming")
    total = float(np.asarray(w).sum())
    if all(s == "optimal" for s in statuses):
        # each point is optimal within rel_gap only: the combined bounds, not the value, bound the total
        return chosen_all, val, max(ub, val), "optimal"
    return chosen_all, val, max(ub, val), "feasible" if ub < total else "heuristic"
