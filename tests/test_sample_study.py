"""The sample study end to end, and its decisions checked by an independent solver."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import scipy.sparse as sp
from click.testing import CliRunner

from geocover.values import SiteRole

SAMPLE = Path(__file__).resolve().parents[1] / "sample_layers"
STUDY = SAMPLE / "tarrow_study.toml"

pytestmark = pytest.mark.skipif(not STUDY.exists(), reason="sample_layers/ is not present")


@pytest.fixture(scope="module")
def sample_run(tmp_path_factory):
    from geocover.toolbox.study import run_study

    out = tmp_path_factory.mktemp("tarrow")
    outcome, outputs = run_study(STUDY, out=out)
    return outcome, outputs, out


def test_the_study_writes_every_layer_report_and_manifest(sample_run):
    import pyogrio

    outcome, outputs, out = sample_run
    layers = {name for name, _ in pyogrio.list_layers(outputs["layers"])}
    assert {"plan_sites", "service_areas", "demand", "uncovered", "screened_sites"} <= layers
    assert (out / "report.html").read_text(encoding="utf-8").count("authority having jurisdiction") >= 1
    manifest = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["plan"]["status"] in ("optimal", "feasible")
    assert {Path(i["path"]).name for i in manifest["inputs"]} >= {"tarrow.gpkg", "tarrow_population_100m.tif", "tarrow_land_use_100m.tif"}
    assert all(len(i["sha256"]) == 64 for i in manifest["inputs"])
    people = manifest["people"]
    assert people["people_covered"] + people["people_left_out"] + people["people_unreachable"] == pytest.approx(
        people["people_as_demand"]
    )


def test_no_chosen_new_site_is_in_or_near_an_exclusion_zone(sample_run):
    """Independently re-read the raw exclusion layers and measure with shapely."""
    import geopandas as gpd
    import shapely

    outcome, outputs, _ = sample_run
    plan_sites = gpd.read_file(outputs["layers"], layer="plan_sites")
    flood = gpd.read_file(SAMPLE / "tarrow.gpkg", layer="flood_zones")
    flood = flood[flood["zone_class"].isin(["A", "AE"])]
    protected = gpd.read_file(SAMPLE / "tarrow.gpkg", layer="protected_land")
    new = plan_sites[plan_sites["role"] == "new"]
    assert len(new) == 6
    # parcels are screened by their whole footprint, so the parcel itself must keep the setback
    parcels = gpd.read_file(SAMPLE / "tarrow.gpkg", layer="candidate_parcels").set_index("parcel_id")
    for site_id, point in zip(new["site_id"], new.geometry):
        parcel = parcels.loc[site_id, "geometry"]
        assert shapely.distance(parcel, shapely.union_all(flood.geometry.values)) >= 50.0 - 1e-6
        assert shapely.distance(parcel, shapely.union_all(protected.geometry.values)) > 0.0
        assert parcel.covers(point)
    # every chosen site (existing ones included) lies outside every exclusion polygon
    zones = shapely.union_all(np.concatenate([flood.geometry.values, protected.geometry.values]))
    assert not shapely.intersects(zones, plan_sites.geometry.values).any()


def test_sample_areas_agree_with_the_grid():
    """Census areas and the grid are reconciled before use (common practice): within 0.5 %."""
    import geopandas as gpd
    import rasterio

    areas = gpd.read_file(SAMPLE / "tarrow.gpkg", layer="census_areas")
    with rasterio.open(SAMPLE / "tarrow_population_100m.tif") as src:
        grid = src.read(1, masked=True)
    assert areas["pop"].sum() == pytest.approx(float(grid.sum()), rel=0.005)


def _merged(reach):
    """Identical covering rows merged (weights summed) so that the reference model stays small."""
    pattern = reach.pattern.tocsr()
    pattern.sort_indices()
    keys = {}
    groups = np.empty(pattern.shape[0], dtype=np.int64)
    for i in range(pattern.shape[0]):
        key = pattern.indices[pattern.indptr[i] : pattern.indptr[i + 1]].tobytes()
        groups[i] = keys.setdefault(key, len(keys))
    weight = np.bincount(groups, weights=reach.weight, minlength=len(keys))
    first = np.unique(groups, return_index=True)[1]
    return pattern[first].astype(float), weight


def test_mclp_objective_equals_highs(sample_run):
    """The MCLP optimum agrees with scipy.optimize.milp (HiGHS), an independent solver on the same matrix."""
    from scipy.optimize import Bounds, LinearConstraint, milp

    outcome, _, _ = sample_run
    reach, plan = outcome.reach, outcome.plan
    a, w = _merged(reach)
    n, m = a.shape
    role = np.asarray(reach.role)
    # variables: x (m sites, binary) then y (n rows, continuous in [0, 1])
    c = np.concatenate([np.zeros(m), -w])
    cover = sp.hstack([-a, sp.identity(n)])  # y_i - sum_j a_ij x_j <= 0
    count = sp.csr_matrix(np.concatenate([(role == SiteRole.CANDIDATE).astype(float), np.zeros(n)]))
    constraints = [LinearConstraint(cover, -np.inf, 0), LinearConstraint(count, 0, 6)]
    if len(reach.close_pairs):
        k = len(reach.close_pairs)
        pairs = sp.csr_matrix((np.ones(2 * k), (np.repeat(np.arange(k), 2), reach.close_pairs.ravel())), shape=(k, m + n))
        constraints.append(LinearConstraint(pairs, 0, 1))
    lower = np.concatenate([(role == SiteRole.KEPT).astype(float), np.zeros(n)])
    integrality = np.concatenate([np.ones(m), np.zeros(n)])
    res = milp(c, constraints=constraints, bounds=Bounds(lower, np.ones(m + n)), integrality=integrality,
               options={"mip_rel_gap": 1e-9, "time_limit": 120})
    assert res.status == 0, res.message
    assert plan.status.value == "optimal"
    assert plan.objective == pytest.approx(-res.fun, rel=1e-7)
    # and the plan covers what it claims when re-counted from the matrix
    assert reach.weight[reach.coverage_count(plan.sites) > 0].sum() == pytest.approx(plan.covered_weight)


def test_lscp_objective_equals_highs(sample_run):
    """The LSCP optimum on the sample coverage agrees with scipy.optimize.milp (HiGHS)."""
    from scipy.optimize import Bounds, LinearConstraint, milp

    from geocover import cover_all

    outcome, _, _ = sample_run
    reach = outcome.reach
    plan = cover_all(reach, time_limit=120)
    a, _w = _merged(reach)
    a = a[np.diff(a.indptr) > 0]  # people no site reaches stay out of the constraints
    m = a.shape[1]
    role = np.asarray(reach.role)
    constraints = [LinearConstraint(a, 1, np.inf)]
    if len(reach.close_pairs):
        k = len(reach.close_pairs)
        pairs = sp.csr_matrix((np.ones(2 * k), (np.repeat(np.arange(k), 2), reach.close_pairs.ravel())), shape=(k, m))
        constraints.append(LinearConstraint(pairs, 0, 1))
    lower = (role == SiteRole.KEPT).astype(float)
    res = milp(np.asarray(reach.cost), constraints=constraints, bounds=Bounds(lower, np.ones(m)),
               integrality=np.ones(m), options={"mip_rel_gap": 1e-9, "time_limit": 120})
    if res.status == 2:  # infeasible with the spacing rule: geocover must say so, not invent a plan
        assert plan.status.value == "infeasible"
        return
    assert res.status == 0, res.message
    assert plan.status.value == "optimal"
    assert plan.objective == pytest.approx(res.fun, rel=1e-7)
    assert (reach.coverage_count(plan.sites)[reach.coverable] > 0).all()


def test_cli_run_of_one_tool_on_the_sample_layers(tmp_path):
    """The same job through `geocover run cover-all` with every option on the command line."""
    from geocover.cli import cli

    gpkg = SAMPLE / "tarrow.gpkg"
    args = [
        "run", "cover-all",
        "--grid", str(SAMPLE / "tarrow_population_100m.tif"), "--coarsen", "3",
        "--candidates", f"{gpkg}:candidate_parcels", "--label-field", "parcel_id", "--fewest",
        "--existing", f"{gpkg}:existing_stations", "--existing-role-field", "status",
        "--exclude", f"{gpkg}:flood_zones; setback=50 m; where=zone_class in ('A', 'AE')",
        "--exclude", f"{gpkg}:protected_land",
        "--distance", "6 km", "--out", str(tmp_path),
    ]
    result = CliRunner().invoke(cli, args, catch_exceptions=False)
    assert result.exit_code == 0, result.output
    for words in ("sites chosen", "people served", "people uncovered", "gap", "authority having jurisdiction"):
        assert words in result.output
    manifest = json.loads((tmp_path / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["model"] == "cover-all"
    assert manifest["plan"]["people_left_out"] == pytest.approx(0.0, abs=1e-6)  # LSCP serves everyone coverable
