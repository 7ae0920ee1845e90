"""Tests of the building blocks: reductions, bounds and local search."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from geocover.models.greedy import covered_weight, greedy_cover, greedy_most, iterated_swap, swap_most
from geocover.models.lagrange import lagrangian_cover, lagrangian_most
from geocover.models.localsearch import cover_local_search
from geocover.models.reduce import as_pattern, components, dominated_columns, merge_rows, reduce_lscp, subset_pairs
from geocover.values import Reach
from test_models_support import geo_instance, ref_lscp, ref_mclp

FAST = settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow], derandomize=True)


def random_sets(seed: int, n: int, m: int, density: float) -> sp.csr_matrix:
    rng = np.random.default_rng(seed)
    return as_pattern(sp.csr_matrix((rng.random((n, m)) < density).astype(np.int8)))


@FAST
@given(seed=st.integers(0, 10_000), n=st.integers(1, 40), m=st.integers(1, 10), density=st.floats(0.1, 0.7))
def test_subset_pairs_equal_brute_force(seed: int, n: int, m: int, density: float) -> None:
    mat = random_sets(seed, n, m, density)
    rows = [set(mat.indices[mat.indptr[i] : mat.indptr[i + 1]].tolist()) for i in range(n)]
    want = {(a, b) for a, b in itertools.permutations(range(n), 2) if rows[b] and rows[b] <= rows[a]}
    found = subset_pairs(mat, chunk=7)  # a tiny chunk exercises the chunking
    assert found is not None
    got = set(zip(found[0].tolist(), found[1].tolist()))
    assert got == want


@FAST
@given(seed=st.integers(0, 10_000), n=st.integers(1, 60), m=st.integers(1, 6))
def test_merge_rows_groups_exactly_identical_rows(seed: int, n: int, m: int) -> None:
    mat = random_sets(seed, n, m, 0.5)
    w = np.arange(1, n + 1, dtype=float)
    merged, mw, group = merge_rows(mat, w)
    dense = mat.toarray()
    for i, j in itertools.combinations(range(n), 2):
        assert (group[i] == group[j]) == bool((dense[i] == dense[j]).all())
    assert mw.sum() == pytest.approx(w.sum())
    assert (merged.toarray() == dense[[int(np.flatnonzero(group == g)[0]) for g in range(merged.shape[0])]]).all()


def test_dominated_columns_keep_the_lowest_index_of_identical_columns() -> None:
    mat = as_pattern(sp.csr_matrix([[1, 1, 1, 0], [1, 1, 0, 0], [0, 0, 0, 1]]))
    dead = dominated_columns(mat, np.array([1.0, 1.0, 1.0, 1.0]))
    # column 1 equals column 0 (dropped, higher index); column 2 is a subset of 0
    assert dead.tolist() == [False, True, True, False]
    # a cheaper subset column survives
    dead = dominated_columns(mat, np.array([2.0, 2.0, 1.0, 1.0]))
    assert dead.tolist() == [False, True, False, False]


def test_reduce_lscp_fixes_essential_sites() -> None:
    # row 2 is covered only by column 3: essential; column 3 also covers row 1
    mat = as_pattern(sp.csr_matrix([[1, 1, 0, 0], [0, 1, 0, 1], [0, 0, 0, 1]]))
    core = reduce_lscp(mat, np.ones(4))
    assert 3 in core.fixed.tolist()
    assert core.matrix.shape[0] <= 1
    # by hand: column 0 covers a subset of column 1 at equal cost and column 2 covers nothing, so both
    # drop; row 0 is then left with column 1 alone, which is essential too: {1, 3} is the whole (optimal) plan
    assert core.fixed.tolist() == [1, 3] and core.matrix.shape == (0, 0) and not core.infeasible


def test_components_are_independent_blocks() -> None:
    mat = as_pattern(sp.block_diag([np.ones((2, 2)), np.ones((3, 1))], format="csr"))
    count, rl, cl = components(mat)
    assert count == 2
    assert rl.tolist() == [0, 0, 1, 1, 1] and cl.tolist() == [0, 0, 1]


@FAST
@given(seed=st.integers(0, 10_000), n=st.integers(2, 40), m=st.integers(2, 12))
def test_lagrangian_cover_bound_is_valid(seed: int, n: int, m: int) -> None:
    reach = geo_instance(seed, n, m, 3.0, roles=False)
    A = reach.pattern[reach.coverable]
    if A.shape[0] < 2:
        return
    g = greedy_cover(A, reach.cost)
    bound, plan = lagrangian_cover(A, reach.cost, upper=float(reach.cost[g].sum()), iterations=500)
    opt = ref_lscp(reach)  # scipy.optimize.milp (HiGHS)
    assert bound <= opt + 1e-6
    if plan is not None:
        assert (np.asarray(A[:, plan].sum(axis=1)).ravel() >= 1).all()


@FAST
@given(seed=st.integers(0, 10_000), n=st.integers(2, 40), m=st.integers(2, 12), p=st.integers(1, 4))
def test_lagrangian_most_bound_is_valid(seed: int, n: int, m: int, p: int) -> None:
    reach = geo_instance(seed, n, m, 2.5, roles=False)
    p = min(p, m)
    A = reach.pattern
    g = greedy_most(A, reach.weight, sites=p)
    bound = lagrangian_most(A, reach.weight, np.ones(m, dtype=bool), p, lower=covered_weight(A, reach.weight, g), iterations=500)
    assert bound >= ref_mclp(reach, p=p) - 1e-6  # scipy.optimize.milp (HiGHS)


@FAST
@given(seed=st.integers(0, 10_000), n=st.integers(5, 80), m=st.integers(3, 20))
def test_local_search_returns_a_cover_no_worse_than_its_start(seed: int, n: int, m: int) -> None:
    reach = geo_instance(seed, n, m, 2.5, roles=False)
    A = reach.pattern[reach.coverable]
    if A.shape[0] == 0:
        return
    start = greedy_cover(A, reach.cost)
    for cost in (reach.cost, np.ones(m)):
        out = cover_local_search(A, cost, start, seed=seed, max_steps=300)
        assert (np.asarray(A[:, out].sum(axis=1)).ravel() >= 1).all()
        assert cost[out].sum() <= cost[start].sum() + 1e-9
        assert cover_local_search(A, cost, start, seed=seed, max_steps=300).tolist() == out.tolist()  # deterministic


def test_local_search_improves_greedy_on_a_geometric_instance() -> None:
    reach = geo_instance(11, 1200, 150, 1.2, roles=False)
    A = reach.pattern[reach.coverable]
    start = greedy_cover(A, np.ones(A.shape[1]))
    out = cover_local_search(A, np.ones(A.shape[1]), start, max_steps=3000)
    assert len(out) < len(start)


@FAST
@given(seed=st.integers(0, 10_000), p=st.integers(1, 5))
def test_swap_and_iterated_swap_never_lose_coverage(seed: int, p: int) -> None:
    reach = geo_instance(seed, 60, 15, 2.0, roles=False)
    A = reach.pattern
    g = greedy_most(A, reach.weight, sites=p)
    s = swap_most(A, reach.weight, g)
    i = iterated_swap(A, reach.weight, s, sites=p, seed=seed, iterations=5)
    vg, vs, vi = (covered_weight(A, reach.weight, x) for x in (g, s, i))
    assert vg <= vs + 1e-9 <= vi + 2e-9
    assert len(s) <= p and len(i) <= p
    # a 1-swap local optimum: no single exchange improves (checked by brute force)
    for out in s:
        for k in set(range(A.shape[1])) - set(s.tolist()):
            trial = np.array(sorted(set(s.tolist()) - {int(out)} | {k}))
            assert covered_weight(A, reach.weight, trial) <= vs + 1e-9


def test_reach_from_sparse_accepts_a_plain_benchmark_matrix() -> None:
    # the same code solves a plain 0/1 matrix with a cost vector
    from geocover.models import cover_all

    mat = sp.csr_matrix(np.array([[1, 0, 1], [1, 1, 0], [0, 1, 1]]))
    plan = cover_all(Reach.from_sparse(mat, cost=[1, 1, 3]))
    assert plan.objective == 2 and plan.sites.tolist() == [0, 1]
