"""solver = "highs": HiGHS through python-mip (from the highsbox package) gives the same optima as CBC.

The error for a missing HiGHS is tested in test_models.py.
"""

from __future__ import annotations

import numpy as np
import pytest

import geocover as gc
from geocover.models.solver import highs_available
from test_models_support import ORLIB, read_orlib

pytestmark = pytest.mark.skipif(not highs_available(), reason="HiGHS is not loadable (pip install 'geocover[highs]')")


def _instance(seed: int, n: int = 250, m: int = 50):
    rng = np.random.default_rng(seed)
    demand = gc.Demand(rng.uniform(0, 10_000, (n, 2)), rng.integers(1, 60, n), crs="EPSG:32626")
    sites = gc.Sites(rng.uniform(0, 10_000, (m, 2)), cost=rng.uniform(1, 3, m), crs="EPSG:32626")
    return gc.reach_planar(demand, sites, 1800.0)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_highs_and_cbc_agree_on_every_model(seed):
    reach = _instance(seed)
    pairs = [
        (gc.cover_all(reach, solver="cbc"), gc.cover_all(reach, solver="highs")),
        (gc.cover_most(reach, sites=4, solver="cbc"), gc.cover_most(reach, sites=4, solver="highs")),
        (gc.cover_target(reach, 0.9, solver="cbc"), gc.cover_target(reach, 0.9, solver="highs")),
    ]
    if seed == 1:  # backup coverage is the slowest to prove; one instance is enough here
        pairs.append((gc.cover_twice(reach, sites=6, first_floor=0.6, solver="cbc"),
                      gc.cover_twice(reach, sites=6, first_floor=0.6, solver="highs")))
    for cbc, highs in pairs:
        assert cbc.status.value == highs.status.value == "optimal", (cbc.model, cbc.status, highs.status)
        assert highs.objective == pytest.approx(cbc.objective, rel=1e-9), cbc.model
        # each plan covers what it claims, re-counted from the matrix
        assert reach.weight[reach.coverage_count(highs.sites) > 0].sum() == pytest.approx(highs.covered_weight)


def test_highs_reaches_the_published_optimum_of_orlib_4_1():
    # J.E. Beasley, EJOR 31 (1987) 85-93: scp41 optimum 429
    path = ORLIB / "scp41.txt"
    if not path.exists():
        pytest.skip(f"OR-Library instance not found at {path}")
    mat, cost = read_orlib(path)
    # without reductions, so that HiGHS itself proves the whole instance
    plan = gc.cover_all(gc.Reach.from_sparse(mat, cost=cost), solver="highs", reduce=False, time_limit=60)
    assert plan.solver == "highs"
    assert plan.status.value == "optimal" and plan.objective == 429
