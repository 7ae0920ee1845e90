"""Output layers: written atomically, read back with GDAL (pyogrio), and adding up."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.spatial import cKDTree

from geocover.evaluate import greedy_order, nearest_chosen, plan_from_sites, site_figures
from geocover.values import Demand, Metric, Reach, ScreeningRecord, ServiceRule, SiteRole, Sites

CRS = "EPSG:32626"


def brute_reach(demand: Demand, sites: Sites, limit: float) -> Reach:
    """Coverage by brute force (a dense distance matrix), independent of geocover.coverage."""
    d = np.hypot(demand.xy[:, None, 0] - sites.xy[None, :, 0], demand.xy[:, None, 1] - sites.xy[None, :, 1])
    rows, cols = np.nonzero(d <= limit)
    return Reach.from_pairs(rows, cols, d[rows, cols], demand, sites, ServiceRule(Metric.PLANAR, limit, "m"))


def circles_of(sites: Sites, plan) -> list:
    import shapely

    return [shapely.buffer(shapely.Point(*sites.xy[j]), 800.0) for j in plan.sites]


@pytest.fixture
def case():
    rng = np.random.default_rng(3)
    # a 30 x 30 grid of 100 m cells, people only on some
    gx, gy = np.meshgrid(np.arange(30) * 100.0 + 50, np.arange(30) * 100.0 + 50)
    xy = np.column_stack([gx.ravel(), gy.ravel()]) + [500000.0, 5000000.0]
    weight = rng.gamma(1.0, 10.0, len(xy)) * (rng.random(len(xy)) < 0.7)
    demand = Demand(xy, weight, footprint=np.full(len(xy), 50 * np.sqrt(2)), crs=CRS)
    site_xy = np.array([[500400.0, 5000400.0], [502600.0, 5000500.0], [501500.0, 5002500.0], [500300.0, 5002700.0]])
    sites = Sites(site_xy, cost=[0.0, 1.0, 1.0, 1.0], role=[SiteRole.KEPT, 0, 0, 0], label=["S1", "C1", "C2", "C3"], crs=CRS)
    reach = brute_reach(demand, sites, 800.0)
    plan = plan_from_sites(reach, [0, 2])
    record = ScreeningRecord(
        xy=site_xy, verdict=["kept"] * 4, rule=[""] * 4, layer=[""] * 4, feature=[-1] * 4,
        nearest_exclusion_m=[np.inf] * 4, site_index=[0, 1, 2, 3], label=["S1", "C1", "C2", "C3"], crs=CRS,
    )
    return demand, sites, reach, plan, record


def test_nearest_chosen_matches_brute_force(case):
    demand, sites, reach, plan, _ = case
    site, value = nearest_chosen(reach, plan.sites)
    d = np.hypot(*(demand.xy[:, None, :] - sites.xy[None, plan.sites, :]).transpose(2, 0, 1))
    within = d <= 800.0
    expect_site = np.where(within.any(axis=1), plan.sites[np.argmin(np.where(within, d, np.inf), axis=1)], -1)
    assert np.array_equal(site, expect_site)
    ok = site >= 0
    assert np.allclose(value[ok], d[ok].min(axis=1))
    assert np.isnan(value[~ok]).all()


def test_site_figures_add_up(case):
    _, _, reach, plan, _ = case
    fig = site_figures(reach, plan.sites)
    count = plan.coverage_count
    # people covered by exactly one chosen site are split among the sites' unique figures
    assert fig.unique.sum() == pytest.approx(reach.weight[count == 1].sum())
    # each site's covered figure counts people covered twice in both
    assert fig.covered.sum() == pytest.approx((reach.weight * count).sum())
    assert sorted(fig.rank.tolist()) == list(range(1, len(plan.sites) + 1))


def test_greedy_order_puts_the_biggest_first():
    mat = sp.csr_matrix(np.array([[1, 0, 1], [1, 0, 0], [0, 1, 0], [0, 0, 1]]))
    reach = Reach.from_sparse(mat, weight=[1, 1, 5, 1])
    # site 1 alone covers 5; then site 0 adds 2; then site 2 adds 1 (row 3)
    assert greedy_order(reach, [0, 1, 2]).tolist() == [2, 1, 3]


def test_written_layers_read_back_and_add_up(case, tmp_path):
    import pyogrio
    import shapely

    from geocover.layers import write_layers
    from geocover.outputs import study_layers

    demand, sites, reach, plan, record = case
    circles = [shapely.buffer(shapely.Point(*sites.xy[j]), 800.0) for j in plan.sites]
    layers = study_layers(reach, plan, record, circles)
    target = write_layers(tmp_path / "study.gpkg", layers)
    listed = {name for name, _ in pyogrio.list_layers(target)}
    maps = {"plan_sites", "service_areas", "covered_area", "demand", "uncovered", "uncovered_areas", "screened_sites"}
    assert listed == maps | {"layer_styles"}
    styled = pyogrio.read_dataframe(target, layer="layer_styles")
    assert set(styled["f_table_name"]) == maps and styled["useAsDefault"].all()
    for name, frame in layers.items():
        info = pyogrio.read_info(target, layer=name)
        assert info["crs"] == CRS
        assert set(frame.columns) - {"geometry"} <= set(info["fields"])
    back = pyogrio.read_dataframe(target, layer="demand")
    assert back["people"].sum() == pytest.approx(demand.total)
    unc = pyogrio.read_dataframe(target, layer="uncovered")
    covered = back.loc[back["status"] == "covered", "people"].sum()
    assert covered == pytest.approx(plan.covered_weight)
    assert covered + unc["people"].sum() == pytest.approx(demand.total)
    areas = pyogrio.read_dataframe(target, layer="uncovered_areas")
    for reason in ("unreachable", "left_out"):
        assert areas.loc[areas["reason"] == reason, "people"].sum() == pytest.approx(
            unc.loc[unc["reason"] == reason, "people"].sum()
        )
    # every uncovered point lies in an uncovered polygon of its own reason
    for reason in ("unreachable", "left_out"):
        polys = shapely.union_all(areas.loc[areas["reason"] == reason].geometry.values)
        pts = unc.loc[unc["reason"] == reason].geometry.values
        assert shapely.covers(polys, pts).all()
    sites_back = pyogrio.read_dataframe(target, layer="plan_sites")
    assert set(sites_back["site_id"]) == {"S1", "C2"}
    assert sites_back.loc[sites_back["site_id"] == "S1", "role"].item() == "existing_kept"
    # the spatial index GDAL made for each layer
    import sqlite3

    with sqlite3.connect(target) as db:
        indexed = {r[0] for r in db.execute("select table_name from gpkg_extensions where extension_name = 'gpkg_rtree_index'")}
        described = dict(db.execute("select table_name, description from gpkg_contents"))
    assert {"plan_sites", "demand", "uncovered_areas"} <= indexed
    assert "unreachable" in described["uncovered"]


def test_a_failed_write_leaves_the_previous_output_intact(case, tmp_path, monkeypatch):
    import geopandas as gpd

    from geocover.errors import OutputError
    from geocover.layers import write_layers
    from geocover.outputs import study_layers

    demand, sites, reach, plan, record = case
    layers = study_layers(reach, plan, record, circles_of(sites, plan))
    target = tmp_path / "study.gpkg"
    write_layers(target, {"demand": layers["demand"]})
    before = target.read_bytes()
    calls = {"n": 0}
    real = gpd.GeoDataFrame.to_file

    def failing(self, *args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 3:
            raise RuntimeError("disk full (simulated)")
        return real(self, *args, **kwargs)

    monkeypatch.setattr(gpd.GeoDataFrame, "to_file", failing)
    with pytest.raises(OutputError, match="disk full"):
        write_layers(target, layers)
    assert target.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["study.gpkg"]


def test_interrupt_during_write_leaves_nothing_new(case, tmp_path, monkeypatch):
    import geopandas as gpd

    from geocover.layers import write_layers
    from geocover.outputs import study_layers

    demand, sites, reach, plan, record = case
    layers = study_layers(reach, plan, record, circles_of(sites, plan))
    real = gpd.GeoDataFrame.to_file
    calls = {"n": 0}

    def interrupted(self, *args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 2:
            raise KeyboardInterrupt
        return real(self, *args, **kwargs)

    monkeypatch.setattr(gpd.GeoDataFrame, "to_file", interrupted)
    with pytest.raises(KeyboardInterrupt):
        write_layers(tmp_path / "new.gpkg", layers)
    assert list(tmp_path.iterdir()) == []


def test_refuses_to_overwrite_an_input(tmp_path, case):
    from geocover.errors import OutputError
    from geocover.layers import write_layers
    from geocover.outputs import study_layers

    demand, sites, reach, plan, record = case
    src = tmp_path / "input.gpkg"
    src.write_bytes(b"precious")
    with pytest.raises(OutputError, match="also an input"):
        write_layers(src, study_layers(reach, plan, record, circles_of(sites, plan)), inputs=(src,))
    assert src.read_bytes() == b"precious"


def test_kdtree_and_brute_force_agree_on_the_fixture(case):
    # guards the fixture itself: the brute-force relation is what a k-d tree finds
    demand, sites, reach, _, _ = case
    tree = cKDTree(sites.xy)
    hits = tree.query_ball_point(demand.xy, 800.0)
    assert sum(len(h) for h in hits) == reach.matrix.nnz


def test_value_types_take_one_value_for_all():
    # a scalar weight, cost or footprint applies to every point or site
    d = Demand(np.zeros((3, 2)), 2.0, footprint=50.0, crs=CRS)
    assert d.weight.tolist() == [2.0, 2.0, 2.0] and d.footprint.tolist() == [50.0] * 3
    s = Sites(np.zeros((2, 2)), cost=4.0, crs=CRS)
    assert s.cost.tolist() == [4.0, 4.0]
    with pytest.raises(ValueError, match="expected 3 values"):
        Demand(np.zeros((3, 2)), [1.0, 2.0])
