"""The audit: a plan re-evaluated at full resolution, the aggregation error and its bound."""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

from geocover.evaluate import audit, coverage_of, plan_from_sites, straddling_weight
from geocover.values import Demand, Sites

from conftest import write_grid


def _grid(tmp_path, seed: int, shape=(48, 40)):
    rng = np.random.default_rng(seed)
    pop = (rng.gamma(0.6, 20.0, size=shape) * (rng.random(shape) < 0.6)).astype("float32")
    return write_grid(tmp_path / f"pop_{seed}.tif", pop, 500000.0, 5000000.0, 100.0), pop


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_coarsened_plan_stays_within_the_straddling_bound(tmp_path, seed):
    import geocover as gc

    path, pop = _grid(tmp_path, seed)
    fine = gc.demand_from_grid(path)
    coarse = gc.demand_from_grid(path, coarsen=4)
    assert coarse.total == pytest.approx(fine.total, rel=1e-9)
    # each block's footprint reaches every 100 m cell centre of its block, so the bound below is sound
    width = pop.shape[1]
    rows, cols = np.divmod(fine.unit, width)
    block_unit = (rows // 4 * 4) * width + cols // 4 * 4
    where = {int(u): k for k, u in enumerate(coarse.unit)}
    k = np.array([where[int(u)] for u in block_unit])
    assert (np.hypot(*(fine.xy - coarse.xy[k]).T) <= coarse.footprint[k] + 1e-9).all()
    assert (coarse.footprint >= 0.5 * np.hypot(400.0, 400.0) - 1e-9).all()
    rng = np.random.default_rng(seed + 10)
    sites = Sites(rng.uniform([500000, 5000000], [504000, 5004800], size=(12, 2)), crs=coarse.crs)
    reach = gc.reach_planar(coarse, sites, 700.0)
    plan = gc.cover_most(reach, sites=3)
    result = audit(plan, fine, reach=reach)
    assert result.people_total == pytest.approx(float(pop.sum()), rel=1e-6)
    assert result.bound_holds
    assert abs(result.aggregation_error) <= result.error_bound + 1e-6
    # the full-resolution figure is an independent brute-force count over the 100 m cells
    chosen = sites.xy[plan.sites]
    d = np.hypot(fine.xy[:, None, 0] - chosen[None, :, 0], fine.xy[:, None, 1] - chosen[None, :, 1]).min(axis=1)
    assert result.covered_full == pytest.approx(float(fine.weight[d <= 700.0].sum()), rel=1e-9)


@settings(max_examples=25, deadline=None)
@given(
    st.integers(min_value=0, max_value=10_000),
    st.floats(min_value=50.0, max_value=1500.0),
    st.floats(min_value=0.0, max_value=300.0),
)
def test_straddling_bound_holds_for_any_scatter_inside_footprints(seed, limit, radius):
    """Units replaced by people anywhere within their footprint never change coverage by more than the bound."""
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 3000, size=(60, 2))
    w = rng.gamma(1.0, 5.0, 60)
    coarse = Demand(xy, w, footprint=np.full(60, radius), crs="EPSG:32626")
    sites_xy = rng.uniform(0, 3000, size=(4, 2))
    # scatter each unit's people over 5 points within its footprint
    angle = rng.uniform(0, 2 * np.pi, size=(60, 5))
    r = radius * np.sqrt(rng.uniform(0, 1, size=(60, 5)))
    fine_xy = (xy[:, None, :] + np.stack([r * np.cos(angle), r * np.sin(angle)], axis=-1)).reshape(-1, 2)
    fine_w = np.repeat(w / 5, 5)

    def covered(points, weights):
        d = np.hypot(points[:, None, 0] - sites_xy[None, :, 0], points[:, None, 1] - sites_xy[None, :, 1]).min(axis=1)
        return float(weights[d <= limit].sum())

    bound, _ = straddling_weight(coarse, sites_xy, limit)
    assert abs(covered(fine_xy, fine_w) - covered(xy, w)) <= bound + 1e-9


def test_today_versus_plan_is_one_table(tmp_path):
    import geocover as gc

    path, _ = _grid(tmp_path, 4)
    demand = gc.demand_from_grid(path)
    sites = Sites([[501000.0, 5001000.0], [503000.0, 5003500.0], [502000.0, 5004000.0]], role=[1, 0, 0], crs=demand.crs)
    reach = gc.reach_planar(demand, sites, 900.0)
    today = coverage_of(reach, [0])
    plan = gc.cover_most(reach, sites=1)
    assert 0 in plan.sites  # kept stays open
    assert coverage_of(reach, plan.sites)["covered"] >= today["covered"]
    given_plan = plan_from_sites(reach, [0])
    assert given_plan.covered_weight == pytest.approx(today["covered"])


def test_audit_tool_evaluates_todays_stations(tiny):
    from geocover.cli import cli

    out = tiny["dir"] / "audit_out"
    result = CliRunner().invoke(
        cli,
        ["run", "audit", "--grid", str(tiny["grid"]), "--existing", f"{tiny['gpkg']}:stations",
         "--existing-role-field", "status", "--existing-label-field", "station_id", "--distance", "800 m", "--out", str(out)],
        catch_exceptions=False,
    )
    assert result.exit_code == 0, result.output
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["model"] == "audit"
    assert manifest["chosen_sites"] == ["S1"]
    # independent count: people within 800 m of the station at (500300, 5001700)
    import rasterio

    with rasterio.open(tiny["grid"]) as src:
        data = src.read(1, masked=True)
        rows, cols = np.nonzero(~np.ma.getmaskarray(data))
        xs, ys = rasterio.transform.xy(src.transform, rows, cols)
    d = np.hypot(np.asarray(xs) - 500300.0, np.asarray(ys) - 5001700.0)
    expect = float(data[rows, cols][d <= 800.0].sum())
    assert manifest["plan"]["people_covered"] == pytest.approx(expect)
