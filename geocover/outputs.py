"""Map-ready output layers: GeoDataFrames built from the core's arrays.

Field names are snake_case with units in the name (``dist_m``, ``time_s``).
The layers are written by :func:`geocover.layers.write_layers` into one
GeoPackage, atomically.
"""

from __future__ import annotations

import logging
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from .evaluate import nearest_chosen, site_figures
from .values import Demand, Metric, Plan, Reach, ScreeningRecord, SiteRole, Sites

if TYPE_CHECKING:
    import geopandas as gpd

__all__ = [
    "LAYER_DESCRIPTIONS",
    "value_field",
    "plan_sites_layer",
    "service_areas_layer",
    "covered_area_layer",
    "demand_layer",
    "uncovered_layers",
    "screened_sites_layer",
    "footprint_boxes",
    "study_layers",
    "demand_frame",
    "sites_frame",
    "coverage_frames",
]

logger = logging.getLogger(__name__)

LAYER_DESCRIPTIONS = {
    "plan_sites": "Sites chosen by the plan: role, cost, people covered, people only this site covers, greedy rank",
    "service_areas": "One service-area polygon per chosen site",
    "covered_area": "The whole area the plan serves, dissolved",
    "demand": "Demand units: people, how many chosen sites cover them, nearest chosen site",
    "uncovered": "People the plan does not cover: unreachable (no site can serve them) or left_out (the plan chose not to)",
    "uncovered_areas": "Dissolved areas of uncovered people, by reason, with people summed per polygon",
    "screened_sites": "Every candidate and existing site with its screening verdict and reason",
}


def value_field(reach: Reach) -> str:
    """``time_s`` for travel-time coverage, ``dist_m`` otherwise."""
    return "time_s" if reach.rule.metric == Metric.NETWORK else "dist_m"


def _frame(data: dict[str, Any], geometry: Any, crs: Any, name: str) -> "gpd.GeoDataFrame":
    import geopandas as gpd

    frame = gpd.GeoDataFrame(data, geometry=geometry, crs=crs)
    frame.attrs["description"] = LAYER_DESCRIPTIONS.get(name, "")
    return frame


def _points(xy: np.ndarray) -> Any:
    import shapely

    return shapely.points(xy[:, 0], xy[:, 1]) if len(xy) else np.array([], dtype=object)


def plan_sites_layer(reach: Reach, plan: Plan) -> "gpd.GeoDataFrame":
    assert reach.sites is not None
    chosen = plan.sites
    figures = site_figures(reach, chosen)
    sites = reach.sites
    role = sites.role[chosen]
    role_text = np.where(
        role == SiteRole.KEPT, "existing_kept", np.where(role == SiteRole.OPTIONAL, "existing_optional_kept", "new")
    )
    data = {
        "site_id": sites.label[chosen].astype(str),
        "site_index": chosen,
        "role": role_text,
        "cost": sites.cost[chosen],
        "people_covered": figures.covered,
        "people_unique": figures.unique,
        "greedy_rank": figures.rank,
        "nearest_chosen_dist_m": figures.nearest_other,
    }
    return _frame(data, _points(sites.xy[chosen]), sites.crs, "plan_sites")


def service_areas_layer(reach: Reach, plan: Plan, polygons: Sequence[Any]) -> "gpd.GeoDataFrame":
    assert reach.sites is not None
    chosen = plan.sites
    if len(polygons) != len(chosen):
        raise ValueError(f"service areas: {len(polygons)} polygons for {len(chosen)} chosen sites")
    figures = site_figures(reach, chosen)
    limit_field = "limit_time_s" if reach.rule.metric == Metric.NETWORK else "limit_dist_m"
    data = {
        "site_id": reach.sites.label[chosen].astype(str),
        "site_index": chosen,
        "people_covered": figures.covered,
        limit_field: np.full(len(chosen), reach.rule.limit if reach.rule.limit is not None else np.nan),
        "metric": np.full(len(chosen), reach.rule.metric.value),
    }
    return _frame(data, list(polygons), reach.sites.crs, "service_areas")


def covered_area_layer(reach: Reach, plan: Plan, polygons: Sequence[Any]) -> "gpd.GeoDataFrame":
    import shapely

    area = shapely.union_all(np.asarray(list(polygons), dtype=object)) if len(polygons) else shapely.Polygon()
    return _frame(
        {"people_covered": [plan.covered_weight], "sites": [len(plan.sites)]},
        [area],
        reach.sites.crs if reach.sites is not None else None,
        "covered_area",
    )


def demand_status(reach: Reach, plan: Plan) -> np.ndarray:
    """``covered``, ``left_out`` or ``unreachable`` per demand row."""
    status = np.where(plan.coverage_count > 0, "covered", "left_out").astype(object)
    status[~reach.coverable] = "unreachable"
    return status


def demand_layer(reach: Reach, plan: Plan) -> "gpd.GeoDataFrame":
    assert reach.demand is not None
    demand = reach.demand
    site, value = nearest_chosen(reach, plan.sites)
    labels = reach.sites.label if reach.sites is not None else np.array([], dtype=object)
    nearest_label = np.where(site >= 0, labels[np.clip(site, 0, None)] if len(labels) else "", "")
    field = value_field(reach)
    data = {
        "unit_id": demand.unit,
        "people": demand.weight,
        "cover_count": plan.coverage_count,
        "status": demand_status(reach, plan),
        "nearest_site": nearest_label.astype(str),
        "nearest_site_index": site,
        f"nearest_{field}": value,
        "footprint_m": demand.footprint,
    }
    return _frame(data, _points(demand.xy), demand.crs, "demand")


def footprint_boxes(demand: Demand, index: np.ndarray) -> Any:
    """Squares standing for each unit's footprint (half-diagonal = footprint), for dissolving.

    Units without a footprint get a 1 m square, so that true points still
    show on a map.
    """
    import shapely

    xy = demand.xy[index]
    half = np.maximum(demand.footprint[index] / np.sqrt(2.0), 0.5)
    return shapely.box(xy[:, 0] - half, xy[:, 1] - half, xy[:, 0] + half, xy[:, 1] + half)


def uncovered_layers(reach: Reach, plan: Plan) -> tuple["gpd.GeoDataFrame", "gpd.GeoDataFrame"]:
    """Points and dissolved polygons of people the plan does not cover, by reason."""
    import shapely

    assert reach.demand is not None
    demand = reach.demand
    status = demand_status(reach, plan)
    mask = (status != "covered") & (demand.weight > 0)
    index = np.flatnonzero(mask)
    points = _frame(
        {"unit_id": demand.unit[index], "people": demand.weight[index], "reason": status[index].astype(str)},
        _points(demand.xy[index]),
        demand.crs,
        "uncovered",
    )
    reasons: list[str] = []
    people: list[float] = []
    units: list[int] = []
    geoms: list[Any] = []
    for reason in ("unreachable", "left_out"):
        sel = index[status[index] == reason]
        if not len(sel):
            continue
        boxes = footprint_boxes(demand, sel)
        merged = shapely.union_all(boxes, grid_size=0.01)
        parts = shapely.get_parts(merged)
        tree = shapely.STRtree(parts)
        centres = _points(demand.xy[sel])
        pt_idx, part_idx = tree.query(centres, predicate="intersects")
        # a centre on a shared edge may touch two parts: keep its first
        first = np.unique(pt_idx, return_index=True)[1]
        pt_idx, part_idx = pt_idx[first], part_idx[first]
        part_people = np.bincount(part_idx, weights=demand.weight[sel][pt_idx], minlength=len(parts))
        part_units = np.bincount(part_idx, minlength=len(parts))
        for k, geom in enumerate(parts):
            reasons.append(reason)
            people.append(float(part_people[k]))
            units.append(int(part_units[k]))
            geoms.append(geom)
    areas = _frame({"reason": reasons, "people": people, "units": units}, geoms, demand.crs, "uncovered_areas")
    return points, areas


def screened_sites_layer(record: ScreeningRecord, plan: Plan | None = None, sites: Sites | None = None) -> "gpd.GeoDataFrame":
    """Every candidate and existing site with its verdict, reason, role and whether the plan chose it.

    Rows with verdict ``invalid`` (no usable location) get an empty geometry.
    """
    import shapely

    located = record.verdict.astype(str) != "invalid"
    geometry = np.full(len(record), None, dtype=object)
    if located.any():
        geometry[located] = shapely.points(record.xy[located])
    chosen = np.zeros(len(record), dtype=bool)
    if plan is not None:
        chosen = np.isin(record.site_index, plan.sites) & (record.site_index >= 0)
    data: dict[str, Any] = {
        "site_id": record.label.astype(str),
        "verdict": record.verdict.astype(str),
        "rule": record.rule.astype(str),
        "rejected_by_layer": record.layer.astype(str),
        "rejected_by_feature": record.feature,
        "nearest_exclusion_m": np.where(np.isfinite(record.nearest_exclusion_m), record.nearest_exclusion_m, np.nan),
        "land_use_share": record.land_use_share,
        "site_index": record.site_index,
    }
    if sites is not None:
        role = np.full(len(record), "", dtype=object)
        kept = record.site_index >= 0
        role[kept] = [SiteRole(int(r)).label for r in sites.role[record.site_index[kept]]]
        data["role"] = role
    data["chosen"] = chosen
    return _frame(data, geometry, record.crs, "screened_sites")


def study_layers(
    reach: Reach,
    plan: Plan,
    record: ScreeningRecord | None,
    service_polygons: Sequence[Any],
) -> dict[str, "gpd.GeoDataFrame"]:
    """Every output layer of a study, in the order they are written."""
    points, areas = uncovered_layers(reach, plan)
    layers = {
        "plan_sites": plan_sites_layer(reach, plan),
        "service_areas": service_areas_layer(reach, plan, service_polygons),
        "covered_area": covered_area_layer(reach, plan, service_polygons),
        "demand": demand_layer(reach, plan),
        "uncovered": points,
        "uncovered_areas": areas,
    }
    if record is not None:
        layers["screened_sites"] = screened_sites_layer(record, plan, reach.sites)
    return layers


def demand_frame(demand: Demand) -> "gpd.GeoDataFrame":
    """Demand points as written by the demand tools (readable back with ``points`` and ``population='people'``)."""
    frame = _frame(
        {"unit_id": demand.unit, "people": demand.weight, "footprint_m": demand.footprint},
        _points(demand.xy),
        demand.crs,
        "demand",
    )
    frame.attrs["description"] = "Weighted demand points (people) with the footprint each stands for"
    return frame


def sites_frame(sites: "Sites") -> "gpd.GeoDataFrame":
    """Usable sites after screening, with role and cost."""
    role = np.array([SiteRole(int(r)).label for r in sites.role], dtype=object)
    frame = _frame(
        {"site_id": sites.label.astype(str), "role": role, "cost": sites.cost, "source_feature": sites.source},
        _points(sites.xy),
        sites.crs,
        "sites",
    )
    frame.attrs["description"] = "Sites that passed screening (existing facilities first), with role and cost"
    return frame


def coverage_frames(reach: Reach) -> dict[str, "gpd.GeoDataFrame"]:
    """The coverage relation as map layers and a pair table."""
    import pandas as pd

    assert reach.demand is not None and reach.sites is not None
    field = value_field(reach)
    mat = reach.matrix
    pattern = reach.pattern
    people = np.asarray(pattern.T @ reach.weight).ravel()
    per_site = np.diff(mat.tocsc().indptr)
    sites = _frame(
        {"site_id": reach.sites.label.astype(str), "demand_units": per_site, "people_reachable": people},
        _points(reach.sites.xy),
        reach.sites.crs,
        "sites_reach",
    )
    sites.attrs["description"] = "Every site with the demand it can reach within the limit"
    demand = _frame(
        {"unit_id": reach.demand.unit, "people": reach.weight, "sites_reaching": np.diff(mat.indptr)},
        _points(reach.demand.xy),
        reach.demand.crs,
        "demand_reach",
    )
    demand.attrs["description"] = "Every demand unit with the number of sites that can reach it"
    rows = np.repeat(np.arange(mat.shape[0]), np.diff(mat.indptr))
    pairs = pd.DataFrame(
        {"unit_id": reach.demand.unit[rows], "site_id": reach.sites.label[mat.indices].astype(str), field: mat.data}
    )
    pairs.attrs["description"] = f"Covering pairs, {reach.rule.describe()}"
    return {"sites_reach": sites, "demand_reach": demand, "coverage_pairs": pairs}
