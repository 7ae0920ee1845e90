"""Trade-off curve: people covered against the number of new sites."""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import ParameterError
from ..values import Plan, Reach, SiteRole, SolveStatus
from ._common import Clock, check_common, check_reach, kept_conflict
from .lscp import cover_all
from .mclp import _drop_idle, build_most_core, combine_curves, most_curve
from .reduce import components, members

logger = logging.getLogger(__name__)

__all__ = ["Tradeoff", "tradeoff", "LEVELS"]

LEVELS = (0.80, 0.90, 0.95, 0.99)


@dataclass(frozen=True, eq=False)
class Tradeoff:
    """People covered for p = 1..P new sites, each point with its bound and gap.

    Attributes
    ----------
    p : (P,) int array
    covered : (P,) float array
        Weight covered by the best plan found with p new sites (kept sites included).
    share : (P,) float array
        ``covered`` / coverable weight.
    bound, gap : (P,) float arrays
        Proven upper bound on the weight coverable with p sites, and the
        relative gap (0 when optimal).
    status : tuple of SolveStatus
    sites : tuple of int arrays
        The plan at each point.
    coverable_weight, uncoverable_weight : float
    lscp : Plan
        The end point: fewest sites that cover every coverable person.
    marks : dict
        Smallest p whose plan reaches each of 80 / 90 / 95 / 99 % of the
        coverable people (None if no p <= P does).
    marks_exact : dict
        True when that p is proven smallest (every smaller p has a bound
        below the level).
    """

    p: np.ndarray
    covered: np.ndarray
    share: np.ndarray
    bound: np.ndarray
    gap: np.ndarray
    status: tuple[SolveStatus, ...]
    sites: tuple[np.ndarray, ...]
    coverable_weight: float
    uncoverable_weight: float
    lscp: Plan | None
    marks: dict[float, int | None] = field(default_factory=dict)
    marks_exact: dict[float, bool] = field(default_factory=dict)
    seconds: float = 0.0

    def __post_init__(self) -> None:
        for name in ("p", "covered", "share", "bound", "gap"):
            arr = np.array(getattr(self, name))
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)

    def __len__(self) -> int:
        return len(self.p)

    def rows(self) -> list[dict[str, Any]]:
        """One plain dict per point (for tables, charts and manifests)."""
        return [
            {"p": int(p), "covered": float(c), "share": float(s), "bound": float(b), "gap": float(g), "status": st.value}
            for p, c, s, b, g, st in zip(self.p, self.covered, self.share, self.bound, self.gap, self.status)
        ]


def tradeoff(
    reach: Reach,
    max_sites: int,
    *,
    time_limit: float = 60.0,
    rel_gap: float = 1e-4,
    threads: int = 1,
    seed: int = 0,
    solver: str = "cbc",
    reduce: bool = True,
    with_lscp: bool = True,
) -> Tradeoff:
    """The MCLP optimum for p = 1..max_sites, plus the LSCP end point.

    The instance is reduced once; each independent component gets its own
    curve (every point solved to optimality or reported with its gap) and
    the components are combined exactly for every p by dynamic programming.
    ``time_limit`` is the budget for the whole call: a quarter goes to the
    LSCP end point, the rest is shared evenly by the curve points (so on a
    large instance each point may come back FEASIBLE with its gap).

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> from geocover.values import Reach
    >>> x = np.arange(9); d = np.abs(x[:, None] - x[None, :])
    >>> t = tradeoff(Reach.from_sparse(sp.csr_matrix((d <= 1).astype(float))), 3)
    >>> t.covered.tolist(), t.lscp.objective, t.marks[0.8]
    ([3.0, 6.0, 9.0], 3.0, 3)
    """
    reach = check_reach(reach)
    check_common(time_limit, rel_gap, threads, seed, solver)
    solver = str(solver).lower()
    n_cand = int((np.asarray(reach.role) == SiteRole.CANDIDATE).sum())
    if isinstance(max_sites, bool) or not isinstance(max_sites, (int, np.integer)) or max_sites < 1:
        raise ParameterError(f"max_sites: must be a whole number >= 1, got {max_sites!r}", param="max_sites")
    if max_sites > n_cand:
        raise ParameterError(f"max_sites: {max_sites} asked for but there are only {n_cand} candidate sites; use at most {n_cand}", param="max_sites")
    P = int(max_sites)
    lscp_share = 0.25 * time_limit if with_lscp else 0.0
    clock = Clock(time_limit - lscp_share)
    clock.reserve(min(0.2 * (time_limit - lscp_share), (0.05 + 2e-8 * reach.matrix.nnz) * P))
    coverable = float(reach.weight[reach.coverable].sum())
    kept = np.asarray(reach.role) == SiteRole.KEPT
    log: list[str] = []
    if kept_conflict(reach) or not reach.coverable.any():
        status = SolveStatus.INFEASIBLE if kept_conflict(reach) else SolveStatus.EMPTY
        z = np.zeros(P)
        return Tradeoff(np.arange(1, P + 1), z, z, z, z, (status,) * P, tuple(np.flatnonzero(kept) for _ in range(P)), coverable, reach.uncoverable_weight, None, {lv: None for lv in LEVELS}, {lv: False for lv in LEVELS}, clock.elapsed)
    core = build_most_core(reach, resource="count", reduce=reduce, deadline=clock.t0 + time_limit / 3.0)
    mat, w = core.matrix, core.weight
    if mat.shape[0]:
        ncomp, row_lab, col_lab = components(mat, core.conflicts) if reduce else (1, np.zeros(mat.shape[0], dtype=np.int64), np.zeros(mat.shape[1], dtype=np.int64))
    else:
        ncomp, row_lab, col_lab = 0, np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    curves, bounds, plans, cols_list = [], [], [], []
    statuses: list[list[str]] = []
    row_sets, col_sets = members(row_lab, ncomp), members(col_lab, ncomp)
    points = sum(int(min(P, core.paid[cols].sum())) + 1 for cols in col_sets) if ncomp else 1
    per_point = max(clock.left, 0.0) / max(points, 1)
    for c in range(ncomp):
        rows, cols = row_sets[c], col_sets[c]
        if len(rows) == 0:
            continue
        sub = mat[rows][:, cols]
        sub.sort_indices()
        conf = core.conflicts[cols][:, cols] if core.conflicts is not None else None
        qmax = int(min(P, core.paid[cols].sum()))
        vals, bnds, pl, st = most_curve(sub, w[rows], core.paid[cols], conf if conf is not None and conf.nnz else None, qmax, clock=clock, time_limit=per_point, rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, log=log)
        curves.append(vals)
        bounds.append(np.minimum.accumulate(bnds[::-1])[::-1])  # f(q) <= f(q') <= bound(q') for q' >= q
        plans.append(pl)
        cols_list.append(cols)
        statuses.append(st)
    covered, bound, gap, status, sites = [], [], [], [], []
    pattern_csc = reach.pattern.tocsc()
    for p in range(1, P + 1):
        val, alloc = combine_curves(curves, p)
        ub, _ = combine_curves(bounds, p)
        local = [cols_list[c][plans[c][q]] for c, q in enumerate(alloc)]
        picked = core.columns[np.concatenate(local).astype(np.int64)] if local else np.zeros(0, dtype=np.int64)
        sites_p = np.union1d(core.fixed, picked)
        sites_p = _drop_idle(reach, sites_p, kept, pattern_csc)
        got = float(reach.weight[reach.coverage_count(sites_p) > 0].sum())
        ub_total = max(got, ub + core.fixed_weight)
        all_opt = all(statuses[c][min(q, len(statuses[c]) - 1)] == "optimal" for c, q in enumerate(alloc)) and ub_total - got <= 1e-9 * max(got, 1.0)
        if all_opt or (ub_total - got) / max(got, 1e-9) <= rel_gap:
            st = SolveStatus.OPTIMAL
            ub_total = got if ub_total - got <= 1e-9 * max(got, 1.0) else ub_total
        else:
            st = SolveStatus.FEASIBLE
        covered.append(got)
        bound.append(ub_total)
        gap.append(0.0 if st == SolveStatus.OPTIMAL else (ub_total - got) / max(got, 1e-9))
        status.append(st)
        sites.append(sites_p)
    covered_a = np.array(covered)
    share = covered_a / coverable if coverable > 0 else np.zeros(P)
    bound_share = np.array(bound) / coverable if coverable > 0 else np.zeros(P)
    marks: dict[float, int | None] = {}
    exact: dict[float, bool] = {}
    for lv in LEVELS:
        hit = np.flatnonzero(share >= lv - 1e-12)
        if len(hit):
            q = int(hit[0])
            marks[lv] = q + 1
            exact[lv] = bool((bound_share[:q] < lv - 1e-12).all())
        else:
            marks[lv] = None
            exact[lv] = bool((bound_share < lv - 1e-12).all())
    lscp = cover_all(reach, use_cost=False, time_limit=max(lscp_share + max(clock.left, 0.0), 0.1), rel_gap=rel_gap, threads=threads, seed=seed, solver=solver, reduce=reduce) if with_lscp else None
    return Tradeoff(np.arange(1, P + 1), covered_a, share, np.array(bound), np.array(gap), tuple(status), tuple(sites), coverable, reach.uncoverable_weight, lscp, marks, exact, clock.elapsed)
