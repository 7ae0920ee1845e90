"""How well a set of sites serves the demand: per-site and per-demand figures, and the audit.

Everything here works on arrays and the :class:`~geocover.values.Reach`
relation; nothing opens a file.

The audit re-evaluates a plan on the full-resolution demand (before any
coarsening or merging) and reports the aggregation error, the difference in
people covered between the model's demand and the full-resolution demand
(Current & Schilling 1990, Geographical Analysis 22(2); Hillsman & Rhoda
1978, Annals of Regional Science 12(3)).  It also bounds that error: only
people in model demand units whose footprint straddles a service-area
boundary can change side, so the error can never exceed their total.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np
import scipy.sparse as sp

from .errors import InputError
from .values import Demand, Metric, Plan, Reach, SiteRole

__all__ = [
    "SiteFigures",
    "site_figures",
    "nearest_chosen",
    "greedy_order",
    "coverage_of",
    "Audit",
    "audit",
    "straddling_weight",
    "existing_sites",
    "plan_from_sites",
]

logger = logging.getLogger(__name__)


def _chosen_columns(reach: Reach, chosen: np.ndarray) -> sp.csr_matrix:
    return reach.matrix[:, np.asarray(chosen, dtype=np.int64)].tocsr()


def coverage_of(reach: Reach, chosen: Any) -> dict[str, float]:
    """People covered by ``chosen`` sites, and shares of the total and of the coverable.

    >>> import scipy.sparse as sp
    >>> r = Reach.from_sparse(sp.csr_matrix([[1, 0], [0, 1], [0, 0]]), weight=[5, 3, 2])
    >>> coverage_of(r, [0])["covered"]
    5.0
    """
    chosen = np.asarray(chosen, dtype=np.int64)
    count = reach.coverage_count(chosen) if len(chosen) else np.zeros(reach.shape[0], dtype=np.int64)
    total = float(reach.weight.sum())
    coverable = total - reach.uncoverable_weight
    covered = float(reach.weight[count > 0].sum())
    return {
        "sites": int(len(chosen)),
        "covered": covered,
        "covered_twice": float(reach.weight[count > 1].sum()),
        "total": total,
        "coverable": coverable,
        "share_of_total": covered / total if total else 0.0,
        "share_of_coverable": covered / coverable if coverable else 0.0,
    }


def nearest_chosen(reach: Reach, chosen: Any) -> tuple[np.ndarray, np.ndarray]:
    """For each demand row: the nearest chosen site that covers it and its distance or time.

    Returns ``(site, value)``; ``site`` is -1 and ``value`` NaN where no
    chosen site covers the row.  Ties go to the lower site index.
    """
    chosen = np.asarray(chosen, dtype=np.int64)
    n = reach.shape[0]
    site = np.full(n, -1, dtype=np.int64)
    value = np.full(n, np.nan)
    if not len(chosen):
        return site, value
    sub = _chosen_columns(reach, chosen)
    rows = np.repeat(np.arange(n), np.diff(sub.indptr))
    if not len(rows):
        return site, value
    # sort by row, then value, then site index; the first entry of each row wins
    order = np.lexsort((chosen[sub.indices], sub.data, rows))
    rows_s = rows[order]
    first = np.ones(len(rows_s), dtype=bool)
    first[1:] = rows_s[1:] != rows_s[:-1]
    pick = order[first]
    site[rows[pick]] = chosen[sub.indices[pick]]
    value[rows[pick]] = sub.data[pick]
    return site, value


def greedy_order(reach: Reach, chosen: Any) -> np.ndarray:
    """Rank of each chosen site (1 = adds most people first) in a greedy re-ordering.

    Kept sites rank by the same rule; ties go to the lower site index.
    """
    chosen = np.asarray(chosen, dtype=np.int64)
    if not len(chosen):
        return np.zeros(0, dtype=np.int64)
    cols = _chosen_columns(reach, chosen).tocsc()
    covered = np.zeros(reach.shape[0], dtype=bool)
    rank = np.zeros(len(chosen), dtype=np.int64)
    left = list(range(len(chosen)))
    for r in range(1, len(chosen) + 1):
        gains = []
        for j in left:
            rows = cols.indices[cols.indptr[j] : cols.indptr[j + 1]]
            gains.append(reach.weight[rows[~covered[rows]]].sum())
        best = left[int(np.argmax(gains))]
        rank[best] = r
        rows = cols.indices[cols.indptr[best] : cols.indptr[best + 1]]
        covered[rows] = True
        left.remove(best)
    return rank


@dataclass(frozen=True)
class SiteFigures:
    """Per chosen site: people it covers, people only it covers, greedy rank, nearest other chosen site."""

    sites: np.ndarray
    covered: np.ndarray
    unique: np.ndarray
    rank: np.ndarray
    nearest_other: np.ndarray


def site_figures(reach: Reach, chosen: Any) -> SiteFigures:
    """Figures for the plan_sites layer."""
    chosen = np.asarray(chosen, dtype=np.int64)
    sub = _chosen_columns(reach, chosen)
    pattern = sp.csr_matrix((np.ones(sub.nnz), sub.indices, sub.indptr), shape=sub.shape)
    count = np.asarray(pattern.sum(axis=1)).ravel()
    covered = np.asarray(pattern.T @ reach.weight).ravel()
    only = np.where(count == 1, reach.weight, 0.0)
    unique = np.asarray(pattern.T @ only).ravel()
    nearest = np.full(len(chosen), np.nan)
    if reach.sites is not None and len(chosen) > 1:
        from scipy.spatial import cKDTree

        xy = reach.sites.xy[chosen]
        dist, _ = cKDTree(xy).query(xy, k=2)
        nearest = dist[:, 1]
    return SiteFigures(chosen, covered, unique, greedy_order(reach, chosen), nearest)


def straddling_weight(demand: Demand, site_xy: np.ndarray, limit_m: float) -> tuple[float, np.ndarray]:
    """People in units whose footprint straddles the edge of the chosen sites' service circles.

    A unit straddles when the nearest chosen site is farther than the limit
    from some part of the footprint and nearer from another: ``d - r <= limit
    < d + r`` with ``d`` its distance to the nearest chosen site and ``r``
    its footprint.  Planar distances in the working CRS.
    """
    if not len(site_xy) or not len(demand):
        return 0.0, np.zeros(len(demand), dtype=bool)
    from scipy.spatial import cKDTree

    d, _ = cKDTree(site_xy).query(demand.xy, k=1)
    r = demand.footprint
    straddle = (d - r <= limit_m) & (d + r > limit_m) & (r > 0)
    return float(demand.weight[straddle].sum()), straddle


@dataclass(frozen=True)
class Audit:
    """A plan (or any set of sites) evaluated on full-resolution demand."""

    sites: int
    people_total: float
    covered_model: float
    covered_full: float
    aggregation_error: float
    error_bound: float
    bound_holds: bool | None
    share_full: float
    notes: tuple[str, ...] = field(default_factory=tuple)

    def summary(self) -> dict[str, Any]:
        return {
            "sites": self.sites,
            "people_total_full_resolution": self.people_total,
            "people_covered_model": self.covered_model,
            "people_covered_full_resolution": self.covered_full,
            "aggregation_error": self.aggregation_error,
            "aggregation_error_bound": self.error_bound,
            "bound_holds": self.bound_holds,
            "share_covered_full_resolution": self.share_full,
            "notes": list(self.notes),
        }


def audit(
    plan: Plan | Any,
    full_demand: Demand,
    reach: Reach | None = None,
    reach_fn: Callable[[Demand, Any], Reach] | None = None,
) -> Audit:
    """Coverage of a plan on the full-resolution demand, with the aggregation error and its bound.

    Parameters
    ----------
    plan : Plan or array of site indices
        The chosen sites.
    full_demand : Demand
        Demand before coarsening or merging.
    reach : Reach, optional
        The relation the plan was solved on (model demand x sites), with its
        ``demand`` and ``sites``; by default the one the plan carries.
    reach_fn : callable, optional
        ``reach_fn(full_demand, chosen_sites) -> Reach`` for rules that need
        more than a limit (road travel time); planar and geodesic rules are
        rebuilt from the rule itself.
    """
    if reach is None and isinstance(plan, Plan):
        reach = plan.reach
    if reach is None or reach.sites is None or reach.demand is None:
        raise InputError(
            "audit: the plan carries no coverage relation with demand and sites; pass reach=, the Reach it was solved on"
        )
    chosen = np.asarray(plan.sites if isinstance(plan, Plan) else plan, dtype=np.int64)
    sites = reach.sites
    from .values import Sites

    chosen_sites = Sites(sites.xy[chosen], sites.cost[chosen], sites.role[chosen], sites.label[chosen], sites.source[chosen], sites.crs)
    notes: list[str] = []
    rule = reach.rule
    if reach_fn is not None:
        full = reach_fn(full_demand, chosen_sites)
    elif rule.metric == Metric.PLANAR and rule.limit is not None:
        from .coverage import reach_planar

        full = reach_planar(full_demand, chosen_sites, rule.limit)
    elif rule.metric == Metric.GEODESIC and rule.limit is not None:
        from .coverage import reach_geodesic

        full = reach_geodesic(full_demand, chosen_sites, rule.limit)
    else:
        raise InputError(f"audit: cannot rebuild {rule.describe()} on the full demand; pass reach_fn")
    covered_full = float(full_demand.weight[full.coverage_count(np.arange(len(chosen))) > 0].sum())
    covered_model = float(reach.weight[reach.coverage_count(chosen) > 0].sum())
    error = covered_full - covered_model
    bound = float("nan")
    holds: bool | None = None
    if rule.metric in (Metric.PLANAR, Metric.GEODESIC) and rule.limit is not None:
        bound, _ = straddling_weight(reach.demand, chosen_sites.xy, rule.limit)
        # tolerance for the sums of many floats
        holds = bool(abs(error) <= bound + 1e-9 * max(full_demand.total, 1.0))
        if rule.metric == Metric.GEODESIC:
            notes.append("the error bound uses planar distances in the working CRS")
    else:
        notes.append("no footprint bound for travel-time coverage: a footprint does not bound travel times")
    total = full_demand.total
    result = Audit(
        sites=int(len(chosen)),
        people_total=total,
        covered_model=covered_model,
        covered_full=covered_full,
        aggregation_error=error,
        error_bound=bound,
        bound_holds=holds,
        share_full=covered_full / total if total else 0.0,
        notes=tuple(notes),
    )
    logger.info(
        "audit: %.0f people covered at full resolution vs %.0f in the model (error %+.0f, bound %.0f)",
        covered_full, covered_model, error, bound,
    )
    return result


def existing_sites(reach: Reach) -> np.ndarray:
    """Indices of today's facilities (kept and optional existing sites)."""
    return np.flatnonzero(np.isin(reach.role, [SiteRole.KEPT, SiteRole.OPTIONAL]))


def plan_from_sites(reach: Reach, chosen: Any, model: str = "given") -> Plan:
    """A :class:`Plan` for a given set of sites (no model solved), e.g. today's facilities."""
    from .values import SolveStatus

    chosen = np.asarray(chosen, dtype=np.int64)
    count = reach.coverage_count(chosen) if len(chosen) else np.zeros(reach.shape[0], dtype=np.int64)
    covered = float(reach.weight[count > 0].sum())
    return Plan(
        sites=chosen,
        model=model,
        objective=covered,
        bound=covered,
        status=SolveStatus.OPTIMAL,
        solver="none",
        seconds=0.0,
        coverage_count=count,
        covered_weight=covered,
        uncoverable_weight=reach.uncoverable_weight,
        total_weight=float(reach.weight.sum()),
        reach=reach,
    )
