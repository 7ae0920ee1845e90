"""Tests of the siting models (LSCP, MCLP) against published optima, closed forms and scipy/HiGHS."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from geocover.errors import ParameterError, SolverError
from geocover.models import cover_all, cover_most
from geocover.models.greedy import greedy_cover
from geocover.models.solver import highs_available, solve_mip
from geocover.values import Reach, SiteRole, SolveStatus
from test_models_support import ORLIB, geo_instance, read_orlib, ref_lscp, ref_mclp

# Published optima of OR-Library set covering class 4: J.E. Beasley, "An algorithm for set covering
# problem", EJOR 31 (1987) 85-93 (also listed in shared/data/orlib/README.md).
ORLIB_OPTIMA = {"41": 429, "42": 512, "43": 516, "44": 494, "45": 512, "46": 560, "47": 430, "48": 492, "49": 641, "410": 514}

FAST = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow], derandomize=True)


# ----------------------------------------------------------------------------- published benchmark


@pytest.mark.parametrize("name", sorted(ORLIB_OPTIMA))
def test_orlib_scp4_reaches_published_optimum(name: str) -> None:
    path = ORLIB / f"scp{name}.txt"
    assert path.exists(), f"OR-Library instance missing at {path}: it ships in tests/data/orlib/, restore it from git"
    mat, cost = read_orlib(path)
    plan = cover_all(Reach.from_sparse(mat, cost=cost), time_limit=30)
    assert plan.status == SolveStatus.OPTIMAL
    assert plan.objective == ORLIB_OPTIMA[name]
    assert plan.bound == ORLIB_OPTIMA[name]
    # the plan really covers every row and costs what it says
    assert (np.asarray(mat[:, plan.sites].sum(axis=1)).ravel() >= 1).all()
    assert cost[plan.sites].sum() == ORLIB_OPTIMA[name]


def test_orlib_without_reductions_same_optimum() -> None:
    path = ORLIB / "scp41.txt"
    assert path.exists(), f"OR-Library instance missing at {path}: it ships in tests/data/orlib/, restore it from git"
    mat, cost = read_orlib(path)
    plan = cover_all(Reach.from_sparse(mat, cost=cost), reduce=False, time_limit=30)
    assert plan.objective == 429 and plan.status == SolveStatus.OPTIMAL


# ----------------------------------------------------------------------------- closed forms


def path_reach(n: int, r: int) -> Reach:
    """n unit-spaced demand points on a line, a site at every point, radius r."""
    x = np.arange(n)
    d = np.abs(x[:, None] - x[None, :]).astype(float)
    return Reach.from_sparse(sp.csr_matrix(np.where(d <= r, d + 0.5, 0.0)))


@pytest.mark.parametrize("n,r", [(1, 1), (7, 1), (10, 1), (25, 2), (40, 3), (17, 0)])
def test_lscp_on_a_path_is_ceil_n_over_2r_plus_1(n: int, r: int) -> None:
    # derived: each site covers at most 2r+1 consecutive points, and sites at r, 3r+1, ... achieve it
    plan = cover_all(path_reach(n, r), use_cost=False)
    assert plan.objective == math.ceil(n / (2 * r + 1))
    assert plan.status == SolveStatus.OPTIMAL
    assert (plan.coverage_count >= 1).all()


@pytest.mark.parametrize("n,r,p", [(10, 1, 1), (10, 1, 2), (10, 1, 4), (30, 2, 3), (30, 2, 6), (12, 0, 5)])
def test_mclp_on_a_path_is_min_n_p_2r_plus_1(n: int, r: int, p: int) -> None:
    # derived: p sites cover at most p(2r+1) points, reached by disjoint windows
    plan = cover_most(path_reach(n, r), sites=p)
    assert plan.objective == min(n, p * (2 * r + 1))
    assert plan.status == SolveStatus.OPTIMAL
    assert len(plan.sites) <= p


# ----------------------------------------------------------------------------- independent solver


@FAST
@given(seed=st.integers(0, 10_000), n=st.integers(1, 40), m=st.integers(1, 12), radius=st.floats(1.0, 4.0), use_cost=st.booleans())
def test_lscp_equals_scipy_highs(seed: int, n: int, m: int, radius: float, use_cost: bool) -> None:
    reach = geo_instance(seed, n, m, radius)
    plan = cover_all(reach, use_cost=use_cost, time_limit=20)
    if not reach.coverable.any():
        assert plan.status == SolveStatus.EMPTY
        return
    # scipy.optimize.milp (HiGHS) as the independent reference
    ref = ref_lscp(reach, use_cost)
    assert plan.status == SolveStatus.OPTIMAL
    assert plan.objective == pytest.approx(ref)
    assert set(np.flatnonzero(reach.role == SiteRole.KEPT)) <= set(plan.sites.tolist())
    assert (plan.coverage_count[reach.coverable] >= 1).all()


@FAST
@given(seed=st.integers(0, 10_000), n=st.integers(1, 40), m=st.integers(1, 12), radius=st.floats(1.0, 4.0), p=st.integers(0, 6))
def test_mclp_equals_scipy_highs(seed: int, n: int, m: int, radius: float, p: int) -> None:
    reach = geo_instance(seed, n, m, radius)
    p = min(p, int((reach.role == SiteRole.CANDIDATE).sum()))
    plan = cover_most(reach, sites=p, time_limit=20)
    if not reach.coverable.any():
        assert plan.status == SolveStatus.EMPTY
        return
    ref = ref_mclp(reach, p=p)  # scipy.optimize.milp (HiGHS)
    assert plan.status == SolveStatus.OPTIMAL
    assert plan.objective == pytest.approx(ref)
    assert plan.covered_weight == pytest.approx(plan.objective)
    assert ((reach.role[plan.sites] == SiteRole.CANDIDATE).sum()) <= p
    assert set(np.flatnonzero(reach.role == SiteRole.KEPT)) <= set(plan.sites.tolist())


@FAST
@given(seed=st.integers(0, 10_000), n=st.integers(1, 40), m=st.integers(1, 12), frac=st.floats(0.0, 1.0))
def test_mclp_budget_equals_scipy_highs(seed: int, n: int, m: int, frac: float) -> None:
    reach = geo_instance(seed, n, m, 2.5)
    kept_cost = float(reach.cost[reach.role == SiteRole.KEPT].sum())
    budget = kept_cost + frac * float(reach.cost.sum())
    plan = cover_most(reach, budget=budget, time_limit=20)
    if not reach.coverable.any():
        return
    ref = ref_mclp(reach, budget=budget)  # scipy.optimize.milp (HiGHS)
    assert plan.objective == pytest.approx(ref)
    paid = reach.role[plan.sites] != SiteRole.OPTIONAL
    assert reach.cost[plan.sites][paid].sum() <= budget + 1e-9


@FAST
@given(seed=st.integers(0, 10_000), n=st.integers(1, 30), m=st.integers(2, 12), spacing=st.floats(0.5, 3.0))
def test_spacing_rule_matches_scipy_highs(seed: int, n: int, m: int, spacing: float) -> None:
    reach = geo_instance(seed, n, m, 3.0, spacing=spacing)
    pairs = reach.close_pairs
    lscp = cover_all(reach, use_cost=False, time_limit=20)
    ref = ref_lscp(reach, use_cost=False)  # scipy.optimize.milp (HiGHS)
    if not reach.coverable.any():
        return
    if ref is None:
        assert lscp.status == SolveStatus.INFEASIBLE
    else:
        assert lscp.objective == pytest.approx(ref)
        x = np.zeros(m, dtype=bool)
        x[lscp.sites] = True
        assert not (x[pairs[:, 0]] & x[pairs[:, 1]]).any() if len(pairs) else True
    p = min(2, int((reach.role == SiteRole.CANDIDATE).sum()))
    mclp = cover_most(reach, sites=p, time_limit=20)
    assert mclp.objective == pytest.approx(ref_mclp(reach, p=p))
    x = np.zeros(m, dtype=bool)
    x[mclp.sites] = True
    if len(pairs):
        assert not (x[pairs[:, 0]] & x[pairs[:, 1]]).any()


# ----------------------------------------------------------------------------- reductions are exact


@FAST
@given(seed=st.integers(0, 10_000), n=st.integers(5, 60), m=st.integers(3, 15), radius=st.floats(1.5, 4.0))
def test_reductions_do_not_change_the_optimum(seed: int, n: int, m: int, radius: float) -> None:
    reach = geo_instance(seed, n, m, radius)
    a = cover_all(reach, reduce=True)
    b = cover_all(reach, reduce=False)
    assert a.objective == pytest.approx(b.objective)
    p = min(3, int((reach.role == SiteRole.CANDIDATE).sum()))
    c = cover_most(reach, sites=p, reduce=True)
    d = cover_most(reach, sites=p, reduce=False)
    assert c.objective == pytest.approx(d.objective)


@FAST
@given(seed=st.integers(0, 10_000), p=st.integers(0, 8))
def test_component_dp_equals_monolithic_mclp(seed: int, p: int) -> None:
    # small radius on a large square: many separate components
    rng = np.random.default_rng(seed)
    n, m = 60, 16
    dxy = rng.uniform(0, 30, (n, 2))
    sxy = rng.uniform(0, 30, (m, 2))
    d = np.hypot(dxy[:, None, 0] - sxy[None, :, 0], dxy[:, None, 1] - sxy[None, :, 1])
    reach = Reach.from_sparse(sp.csr_matrix(np.where(d <= 4.0, 1.0, 0.0)), weight=rng.integers(1, 9, n).astype(float))
    dp = cover_most(reach, sites=p, reduce=True)
    mono = cover_most(reach, sites=p, reduce=False)
    assert dp.objective == pytest.approx(mono.objective)
    assert dp.objective == pytest.approx(ref_mclp(reach, p=p))  # scipy.optimize.milp (HiGHS)
    if dp.params["components"] > 1 and p:
        assert any("dynamic programming" in line for line in dp.log)


# ----------------------------------------------------------------------------- greedy


def _harmonic(d: int) -> float:
    return sum(1.0 / k for k in range(1, d + 1))


@FAST
@given(seed=st.integers(0, 10_000), n=st.integers(1, 50), m=st.integers(1, 14))
def test_greedy_within_chvatal_bound(seed: int, n: int, m: int) -> None:
    # Chvatal (1979), Math. Oper. Res. 4(3): greedy cost <= H(d) * optimum, d = largest column size
    reach = geo_instance(seed, n, m, 3.0, roles=False)
    A = reach.pattern[reach.coverable]
    if A.shape[0] == 0:
        return
    chosen = greedy_cover(A, reach.cost)
    assert chosen is not None
    assert (np.asarray(A[:, chosen].sum(axis=1)).ravel() >= 1).all()
    d = int(np.diff(A.tocsc().indptr).max())
    opt = ref_lscp(reach)  # scipy.optimize.milp (HiGHS)
    assert reach.cost[chosen].sum() <= _harmonic(d) * opt + 1e-9


# ----------------------------------------------------------------------------- roles, statuses, errors


def test_kept_sites_are_always_in_the_plan() -> None:
    # site 2 covers nothing useful and is expensive, but it is kept
    mat = sp.csr_matrix([[1, 0, 0], [1, 1, 0], [0, 1, 1]])
    reach = Reach.from_sparse(mat, cost=[1, 1, 9], role=[0, 0, SiteRole.KEPT])
    plan = cover_all(reach)
    assert 2 in plan.sites
    assert plan.objective == 10.0  # kept cost counts in the objective
    most = cover_most(reach, sites=1)
    assert 2 in most.sites
    assert most.objective == 3.0


def test_uncoverable_rows_are_reported_not_infeasible() -> None:
    mat = sp.csr_matrix([[1, 0], [0, 0], [0, 1]])
    reach = Reach.from_sparse(mat, weight=[3, 5, 2])
    plan = cover_all(reach, use_cost=False)
    assert plan.status == SolveStatus.OPTIMAL
    assert plan.objective == 2
    assert plan.uncoverable_weight == 5
    assert plan.covered_weight == 5
    assert plan.coverage_count.tolist() == [1, 0, 1]


def test_nothing_coverable_gives_an_empty_plan() -> None:
    reach = Reach.from_sparse(sp.csr_matrix((3, 2)), weight=[1, 2, 3])
    for plan in (cover_all(reach), cover_most(reach, sites=1)):
        assert plan.status == SolveStatus.EMPTY
        assert len(plan.sites) == 0
        assert plan.uncoverable_weight == 6


def test_optional_existing_sites_are_free_in_mclp() -> None:
    # site 0 is an optional existing facility: it costs nothing and does not count toward p
    mat = sp.csr_matrix([[1, 0, 0], [0, 1, 0], [0, 0, 1]])
    reach = Reach.from_sparse(mat, weight=[10, 5, 1], role=[SiteRole.OPTIONAL, 0, 0])
    plan = cover_most(reach, sites=1)
    assert plan.sites.tolist() == [0, 1]
    assert plan.objective == 15


def test_parameter_errors_name_the_parameter() -> None:
    reach = Reach.from_sparse(sp.csr_matrix([[1, 1], [0, 1]]), cost=[2, 3], role=[SiteRole.KEPT, 0])
    with pytest.raises(ParameterError) as e:
        cover_most(reach, sites=5)
    assert e.value.param == "sites" and "only 1 candidate" in str(e.value)
    with pytest.raises(ParameterError) as e:
        cover_most(reach, sites=-1)
    assert e.value.param == "sites"
    with pytest.raises(ParameterError) as e:
        cover_most(reach, budget=1.0)
    assert e.value.param == "budget" and "kept" in str(e.value)
    with pytest.raises(ParameterError):
        cover_most(reach)
    with pytest.raises(ParameterError):
        cover_most(reach, sites=1, budget=3.0)
    with pytest.raises(ParameterError) as e:
        cover_all(reach, time_limit=0)
    assert e.value.param == "time_limit"
    with pytest.raises(ParameterError) as e:
        cover_all(reach, solver="nope")
    assert e.value.param == "solver"
    with pytest.raises(ParameterError) as e:
        cover_all(sp.csr_matrix([[1]]))  # type: ignore[arg-type]
    assert e.value.param == "reach"
    # True/False are ints to Python, not seconds, fractions or counts
    for name in ("time_limit", "rel_gap", "threads", "seed"):
        with pytest.raises(ParameterError) as e:
            cover_all(reach, **{name: True})
        assert e.value.param == name


def test_highs_missing_is_a_clear_solver_error(monkeypatch: pytest.MonkeyPatch) -> None:
    # HiGHS may be installed here (highsbox): make python-mip fail to load it, as where it is not
    import mip

    import geocover.models.solver as solver_mod

    real_model = mip.Model

    def no_highs(*args, **kwargs):
        if str(kwargs.get("solver_name", "")).upper() == "HIGHS":
            raise FileNotFoundError("libhighs.so: cannot open shared object file")
        return real_model(*args, **kwargs)

    monkeypatch.setattr(mip, "Model", no_highs)
    monkeypatch.setattr(solver_mod, "highs_available", lambda: False)
    with pytest.raises(SolverError, match="highsbox"):
        solve_mip(np.ones(3), sp.csr_matrix(np.eye(3)), np.array([b"G"] * 3), np.ones(3), solver="highs")
    # raised up front, even when greedy alone would prove the plan optimal
    with pytest.raises(SolverError, match="solver='cbc'"):
        cover_all(Reach.from_sparse(sp.csr_matrix(np.eye(3))), solver="highs")


@pytest.mark.skipif(not highs_available(), reason="python-mip cannot load HiGHS here (needs highsbox or highspy<=1.14)")
@pytest.mark.parametrize("seed", [0, 1])
def test_highs_back_end_reaches_the_reference_optima(seed: int) -> None:
    # optima by scipy.optimize.milp (HiGHS through scipy, not through python-mip)
    r = geo_instance(seed, 60, 25, 2.0)
    assert cover_all(r, solver="highs").objective == pytest.approx(ref_lscp(r))
    assert cover_most(r, sites=3, solver="highs").objective == pytest.approx(ref_mclp(r, p=3))


def test_deterministic_ties_broken_by_site_order() -> None:
    # four identical sites: the lowest index is chosen, every time
    reach = Reach.from_sparse(sp.csr_matrix(np.ones((5, 4))))
    assert cover_all(reach, use_cost=False).sites.tolist() == [0]
    assert cover_most(reach, sites=1).sites.tolist() == [0]
    r2 = geo_instance(7, 40, 12, 2.5)
    assert cover_all(r2).sites.tolist() == cover_all(r2).sites.tolist()
    assert cover_most(r2, sites=3).sites.tolist() == cover_most(r2, sites=3).sites.tolist()


@pytest.mark.parametrize("bulk", [True, False])
def test_bulk_build_solves_a_model_given_as_arrays(bulk: bool, monkeypatch: pytest.MonkeyPatch) -> None:
    import geocover.models.solver as solver_mod

    monkeypatch.setattr(solver_mod, "_BULK_LOAD", bulk)  # one Cbc_loadProblem call, or a call per row
    # min x0 + 2 x1 + 3 x2  s.t. x0 + x1 >= 1, x1 + x2 >= 1  -> x1 = 1, objective 2
    A = sp.csr_matrix([[1.0, 1.0, 0.0], [0.0, 1.0, 1.0]])
    for guard in (False, True):
        res = solve_mip(np.array([1.0, 2.0, 3.0]), A, np.array([b"G", b"G"]), np.ones(2), time_limit=10, guard=guard)
        assert res.status == "optimal"
        assert res.objective == pytest.approx(2.0)
        assert res.x.round().tolist() == [0.0, 1.0, 0.0]
    # max 3 x0 + 2 x1 + y  s.t. x0 + x1 <= 1 (L), y - x1 = 0 (E), 0 <= y <= 1 continuous -> x0 = 1, objective 3
    B = sp.csr_matrix([[1.0, 1.0, 0.0], [0.0, -1.0, 1.0]])
    res = solve_mip(np.array([3.0, 2.0, 1.0]), B, np.array([b"L", b"E"]), np.array([1.0, 0.0]), integer=np.array([True, True, False]), maximize=True, time_limit=10, guard=False)
    assert res.status == "optimal" and res.objective == pytest.approx(3.0)
    # and a whole model through each path gives the published optimum
    path = ORLIB / "scp41.txt"
    if path.exists():
        mat, cost = read_orlib(path)
        assert cover_all(Reach.from_sparse(mat, cost=cost), reduce=False).objective == 429


def test_time_limit_is_honoured_and_plan_never_worse_than_greedy() -> None:
    reach = geo_instance(3, 1500, 300, 1.0, roles=False)
    plan = cover_all(reach, use_cost=False, time_limit=2.0)
    assert plan.seconds < 2.0 + 1.5
    A = reach.pattern[reach.coverable]
    g = greedy_cover(A, np.ones(A.shape[1]))
    assert plan.objective <= len(g)
    assert plan.bound <= plan.objective
    assert plan.status in (SolveStatus.OPTIMAL, SolveStatus.FEASIBLE)


def test_two_essential_sites_in_conflict_make_the_lscp_infeasible() -> None:
    # rows 0 and 1 each have a single site, and the two sites are too close to both open
    mat = sp.csr_matrix([[1, 0, 0], [0, 1, 0], [0, 1, 1]])
    reach = Reach.from_sparse(mat, close_pairs=[[0, 1]])
    assert ref_lscp(reach) is None  # scipy.optimize.milp (HiGHS) agrees there is no plan
    plan = cover_all(reach)
    assert plan.status == SolveStatus.INFEASIBLE
    # MCLP is still fine: it picks the better of the two
    most = cover_most(Reach.from_sparse(mat, weight=[1, 5, 1], close_pairs=[[0, 1]]), sites=2)
    assert most.objective == pytest.approx(ref_mclp(Reach.from_sparse(mat, weight=[1, 5, 1], close_pairs=[[0, 1]]), p=2))
