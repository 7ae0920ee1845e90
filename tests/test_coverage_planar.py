"""Planar coverage against a brute-force distance check (scipy.spatial.distance.cdist)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.spatial.distance import cdist

from geocover.coverage import check_memory, estimate_pairs, reach_planar
from geocover.errors import CRSError, InputError, ParameterError
from geocover.values import Demand, Metric, Sites

UTM = "EPSG:32633"


def _dense(reach):
    mat = reach.matrix
    rows = np.repeat(np.arange(mat.shape[0]), np.diff(mat.indptr))
    covered = np.zeros(mat.shape, dtype=bool)
    covered[rows, mat.indices] = True
    return covered, rows


def _check_against_cdist(d, s, limit, **kw):
    reach = reach_planar(Demand(d, np.ones(len(d)), crs=UTM), Sites(s, crs=UTM), limit, **kw)
    # brute force: every pair measured with scipy's cdist (Euclidean), inclusive at the limit
    dist = cdist(d, s)
    covered, rows = _dense(reach)
    np.testing.assert_array_equal(covered, dist <= limit)
    np.testing.assert_array_equal(reach.matrix.data, dist[rows, reach.matrix.indices])
    # canonical CSR: columns increasing within each row, no duplicates
    mat = reach.matrix
    for i in range(mat.shape[0]):
        cols = mat.indices[mat.indptr[i] : mat.indptr[i + 1]]
        assert np.all(np.diff(cols) > 0)
    return reach


@pytest.mark.parametrize("seed", range(12))
def test_random_instances_match_brute_force(seed):
    rng = np.random.default_rng(seed)
    n, m = int(rng.integers(1, 300)), int(rng.integers(1, 50))
    d = rng.uniform(-500, 1500, (n, 2))
    s = rng.uniform(-500, 1500, (m, 2))
    if seed % 2:  # lattice coordinates: many pairs at exactly the limit
        d, s = np.round(d / 50) * 50, np.round(s / 50) * 50
    limit = float(rng.choice([50.0, 100.0, 250.0, 5000.0]))
    _check_against_cdist(d, s, limit, chunk_rows=int(rng.integers(1, 400)))


def test_points_exactly_at_the_limit_are_covered():
    # 3-4-5 triangles and axis-aligned offsets: the distances are exactly 5 in float64
    s = np.array([[1000.0, 2000.0]])
    offsets = np.array([[3, 4], [-3, 4], [4, -3], [-4, -3], [5, 0], [0, -5], [0, 5], [-5, 0]], dtype=float)
    d = np.vstack([s + offsets, s + offsets * 1.0000001, s + offsets * 0.9999999])
    reach = _check_against_cdist(d, s, 5.0)
    assert reach.coverable.tolist() == [True] * 8 + [False] * 8 + [True] * 8
    assert np.all(reach.matrix.data[:8] == 5.0)


def test_threads_and_chunks_give_the_same_relation():
    rng = np.random.default_rng(7)
    d = rng.uniform(0, 10_000, (3000, 2))
    s = rng.uniform(0, 10_000, (80, 2))
    one = reach_planar(Demand(d, np.ones(3000), crs=UTM), Sites(s, crs=UTM), 900.0)
    two = reach_planar(Demand(d, np.ones(3000), crs=UTM), Sites(s, crs=UTM), 900.0, chunk_rows=257, threads=2)
    assert (one.matrix != two.matrix).nnz == 0
    _check_against_cdist(d, s, 900.0, chunk_rows=1000, threads=2)


def test_site_on_a_demand_point_is_stored_as_explicit_zero():
    d = np.array([[0.0, 0.0], [1.0, 0.0]])
    reach = reach_planar(Demand(d, [2.0, 3.0], crs=UTM), Sites(np.array([[0.0, 0.0]]), cost=[4.0], crs=UTM), 0.5)
    assert reach.matrix.nnz == 1 and reach.matrix.data[0] == 0.0
    assert reach.coverable.tolist() == [True, False]
    assert reach.rule.metric == Metric.PLANAR and reach.rule.limit == 0.5 and reach.rule.unit == "m"
    assert reach.weight.tolist() == [2.0, 3.0] and reach.cost.tolist() == [4.0]
    assert reach.matrix.dtype == np.float64 and sp.isspmatrix_csr(reach.matrix)


def test_empty_inputs():
    d = Demand(np.zeros((0, 2)), np.zeros(0), crs=UTM)
    s = Sites(np.array([[0.0, 0.0]]), crs=UTM)
    assert reach_planar(d, s, 10.0).shape == (0, 1)
    d2 = Demand(np.array([[0.0, 0.0]]), [1.0], crs=UTM)
    r = reach_planar(d2, Sites(np.zeros((0, 2)), crs=UTM), 10.0)
    assert r.shape == (1, 0) and r.uncoverable_weight == 1.0


def test_far_away_sites_cover_nothing():
    d = np.random.default_rng(1).uniform(0, 100, (50, 2))
    s = np.array([[1e6, 1e6], [-1e6, 0.0]])
    assert reach_planar(Demand(d, np.ones(50), crs=UTM), Sites(s, crs=UTM), 1000.0).matrix.nnz == 0


def test_geographic_crs_is_refused_with_the_fix():
    d = Demand(np.array([[10.0, 50.0]]), [1.0], crs="EPSG:4326")
    s = Sites(np.array([[10.0, 50.0]]), crs="EPSG:4326")
    with pytest.raises(CRSError, match="projected") as err:
        reach_planar(d, s, 1000.0)
    assert "geodesic" in str(err.value)
    # sites in degrees are refused too when only they carry a CRS
    with pytest.raises(CRSError, match="sites CRS"):
        reach_planar(Demand(np.array([[10.0, 50.0]]), [1.0]), s, 1000.0)


def test_sites_in_another_crs_are_refused():
    d = Demand(np.array([[0.0, 0.0]]), [1.0], crs=UTM)
    s = Sites(np.array([[0.0, 0.0]]), crs="EPSG:3857")
    with pytest.raises(CRSError, match="reproject"):
        reach_planar(d, s, 1000.0)


@pytest.mark.parametrize("name, bad", [("chunk_rows", 0), ("chunk_rows", "many"), ("threads", None), ("threads", -1)])
def test_bad_chunk_rows_or_threads_name_the_parameter(name, bad):
    d = Demand(np.array([[0.0, 0.0]]), [1.0], crs=UTM)
    s = Sites(np.array([[0.0, 0.0]]), crs=UTM)
    with pytest.raises(ParameterError) as err:
        reach_planar(d, s, 10.0, **{name: bad})
    assert err.value.param == name


@pytest.mark.parametrize("bad", [0, -5.0, float("nan"), float("inf"), "far"])
def test_bad_limit_is_a_parameter_error(bad):
    d = Demand(np.array([[0.0, 0.0]]), [1.0], crs=UTM)
    s = Sites(np.array([[0.0, 0.0]]), crs=UTM)
    with pytest.raises(ParameterError) as err:
        reach_planar(d, s, bad)
    assert err.value.param == "limit"


def test_estimate_is_exact_on_the_whole_demand_and_close_on_a_sample():
    rng = np.random.default_rng(3)
    d = Demand(rng.uniform(0, 20_000, (20_000, 2)), np.ones(20_000), crs=UTM)
    s = Sites(rng.uniform(0, 20_000, (200, 2)), crs=UTM)
    nnz = reach_planar(d, s, 1500.0).matrix.nnz
    assert estimate_pairs(d, s, 1500.0, sample=20_000) == nnz
    assert abs(estimate_pairs(d, s, 1500.0, sample=2000) - nnz) < 0.1 * nnz


def test_memory_budget_refusal_names_a_factor_that_fits():
    rng = np.random.default_rng(4)
    d = Demand(rng.uniform(0, 10_000, (40_000, 2)), np.ones(40_000), crs=UTM)
    s = Sites(rng.uniform(0, 10_000, (400, 2)), crs=UTM)
    pairs = estimate_pairs(d, s, 2000.0, sample=40_000)
    budget = pairs * 15.0 / 1e9 / 5.0  # a fifth of what is needed: factor 3 (9x fewer points) fits, 2 does not
    with pytest.raises(InputError, match="factor of 3"):
        reach_planar(d, s, 2000.0, memory_budget_gb=budget)
    check_memory(pairs // 9, budget, 40_000 // 9)  # the named factor does fit
    with pytest.raises(ParameterError):
        check_memory(10, -1.0, 10)
    with pytest.raises(ParameterError) as err:
        check_memory(10, "lots", 10)  # not a number: named, not a bare ValueError
    assert err.value.param == "memory_budget_gb"
    assert reach_planar(d, s, 2000.0, memory_budget_gb=budget * 6).matrix.nnz > 0


def test_a_short_pair_estimate_only_grows_the_arrays(monkeypatch):
    import geocover.coverage as cov

    monkeypatch.setattr(cov, "estimate_pairs", lambda *a, **k: 1)  # forces the growth path
    rng = np.random.default_rng(11)
    d = rng.uniform(0, 2000, (4000, 2))
    s = rng.uniform(0, 2000, (60, 2))
    reach = _check_against_cdist(d, s, 900.0, chunk_rows=500)
    assert reach.matrix.nnz > 65_536 + 1  # more pairs than the first allocation held


from hypothesis import given, settings
from hypothesis import strategies as st

_coords = st.lists(st.tuples(st.integers(-40, 40), st.integers(-40, 40)), min_size=1, max_size=40)


@settings(max_examples=60, deadline=None)
@given(_coords, _coords, st.sampled_from([1.0, 5.0, 10.0, 13.0, 25.0]), st.integers(1, 50))
def test_property_equals_brute_force_on_integer_lattices(d, s, limit, chunk):
    # integer coordinates put many pairs exactly at the limit (e.g. 5-12-13 triangles); brute force is cdist
    _check_against_cdist(np.array(d, float) * 10.0, np.array(s, float) * 10.0, limit * 10.0, chunk_rows=chunk)


def test_sites_in_several_blocks(monkeypatch):
    import geocover.coverage as cov

    monkeypatch.setattr(cov, "_SITES_PER_BLOCK", 7)
    monkeypatch.setattr(cov, "_CANDIDATES_PER_BLOCK", 50)
    rng = np.random.default_rng(12)
    _check_against_cdist(rng.uniform(0, 3000, (500, 2)), rng.uniform(0, 3000, (90, 2)), 400.0, chunk_rows=128)
