"""Properties of plans on random small instances (hypothesis), re-checked by brute force.

* a plan covers exactly what it claims (distances recomputed with numpy, not geocover.coverage);
* LSCP covers every coverable person, MCLP never opens more than p new sites, kept sites are open;
* the optimum matches an independent solver: scipy.optimize.milp (HiGHS).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import geocover as gc
from geocover.values import SiteRole

CRS = "EPSG:32626"


@st.composite
def instances(draw):
    n = draw(st.integers(1, 25))
    m = draw(st.integers(1, 8))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    dxy = rng.random((n, 2)) * 2000 + [500000, 5000000]
    sxy = rng.random((m, 2)) * 2000 + [500000, 5000000]
    if draw(st.booleans()):  # a site exactly on a demand point, and one exactly at the limit
        sxy[0] = dxy[0]
    weight = rng.integers(0, 50, n).astype(float)
    cost = rng.integers(1, 5, m).astype(float)
    kept = rng.random(m) < draw(st.sampled_from([0.0, 0.2]))
    role = np.where(kept, SiteRole.KEPT, SiteRole.CANDIDATE).astype(np.int8)
    limit = draw(st.sampled_from([150.0, 400.0, 800.0]))
    if draw(st.booleans()) and n > 1:
        sxy[-1] = dxy[1] + [limit, 0.0]  # exactly at the limit: inclusive, so covered
    demand = gc.Demand(dxy, weight, crs=CRS)
    sites = gc.Sites(sxy, cost=cost, role=role, crs=CRS)
    return demand, sites, limit


def brute(demand, sites, limit):
    """Dense 0/1 coverage by direct distance, independent of geocover.coverage."""
    d = np.hypot(demand.xy[:, None, 0] - sites.xy[None, :, 0], demand.xy[:, None, 1] - sites.xy[None, :, 1])
    return d <= limit


def covered_by(a, weight, chosen):
    hit = a[:, np.asarray(chosen, dtype=np.int64)].any(axis=1) if len(chosen) else np.zeros(len(a), bool)
    return float(weight[hit].sum())


def highs_mclp(a, weight, role, p):
    """max sum w y  s.t.  y_i <= sum_j a_ij x_j,  sum_{candidates} x <= p,  x_kept = 1 (scipy.optimize.milp, HiGHS)."""
    from scipy.optimize import Bounds, LinearConstraint, milp

    n, m = a.shape
    c = np.concatenate([np.zeros(m), -weight])
    link = sp.hstack([-sp.csr_matrix(a.astype(float)), sp.eye(n)])
    count = np.concatenate([(role == SiteRole.CANDIDATE).astype(float), np.zeros(n)])
    lb = np.concatenate([(role == SiteRole.KEPT).astype(float), np.zeros(n)])
    res = milp(c, constraints=[LinearConstraint(link, -np.inf, 0), LinearConstraint(count, -np.inf, p)],
               integrality=np.ones(m + n), bounds=Bounds(lb, np.ones(m + n)))
    assert res.success
    return -res.fun


def highs_lscp(a, cost, role, coverable):
    """min sum c x  s.t.  every coverable row covered, x_kept = 1 (scipy.optimize.milp, HiGHS)."""
    from scipy.optimize import Bounds, LinearConstraint, milp

    m = a.shape[1]
    res = milp(cost, constraints=[LinearConstraint(a[coverable].astype(float), 1, np.inf)],
               integrality=np.ones(m), bounds=Bounds((role == SiteRole.KEPT).astype(float), np.ones(m)))
    assert res.success
    return res.fun


PROPS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@PROPS
@given(instances())
def test_reach_matches_brute_force(inst):
    demand, sites, limit = inst
    reach = gc.reach_planar(demand, sites, limit_m=limit)
    assert (reach.pattern.toarray() == 1).tolist() == brute(demand, sites, limit).tolist()


@PROPS
@given(instances(), st.integers(0, 4))
def test_mclp_claims_hold_by_brute_force_and_match_highs(inst, p):
    demand, sites, limit = inst
    a = brute(demand, sites, limit)
    reach = gc.reach_planar(demand, sites, limit_m=limit)
    n_cand = int((sites.role == SiteRole.CANDIDATE).sum())
    p = min(p, n_cand)
    plan = gc.cover_most(reach, sites=p)
    chosen = np.asarray(plan.sites)
    assert set(sites.kept) <= set(chosen.tolist())  # kept sites are always open
    assert int((sites.role[chosen] == SiteRole.CANDIDATE).sum()) <= p  # never more than p new sites
    assert plan.covered_weight == pytest.approx(covered_by(a, demand.weight, chosen))
    assert plan.uncoverable_weight == pytest.approx(float(demand.weight[~a.any(axis=1)].sum()))
    assert plan.total_weight == pytest.approx(demand.total)
    counts = a[:, chosen].sum(axis=1) if len(chosen) else np.zeros(len(a))
    assert list(plan.coverage_count) == list(counts)
    # at most 25 x 8: always proven within the default minute, so the optimum check always runs
    assert plan.status in (gc.SolveStatus.OPTIMAL, gc.SolveStatus.EMPTY)
    assert plan.covered_weight == pytest.approx(highs_mclp(a, demand.weight, sites.role, p), rel=1e-4, abs=1e-6)


@PROPS
@given(instances(), st.booleans())
def test_lscp_covers_every_coverable_person_and_matches_highs(inst, use_cost):
    demand, sites, limit = inst
    a = brute(demand, sites, limit)
    reach = gc.reach_planar(demand, sites, limit_m=limit)
    plan = gc.cover_all(reach, use_cost=use_cost)
    chosen = np.asarray(plan.sites)
    assert set(sites.kept) <= set(chosen.tolist())
    coverable = a.any(axis=1)
    people = coverable & (demand.weight > 0)  # every coverable person is served
    assert a[np.ix_(people, chosen)].any(axis=1).all() or not people.any()
    assert plan.covered_weight == pytest.approx(float(demand.weight[coverable].sum()))
    assert plan.status == (gc.SolveStatus.OPTIMAL if coverable.any() else gc.SolveStatus.EMPTY)
    if coverable.any():
        cost = sites.cost if use_cost else np.ones(len(sites))
        assert float(cost[chosen].sum()) == pytest.approx(highs_lscp(a, cost, sites.role, coverable), rel=1e-4)
