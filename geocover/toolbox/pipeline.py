"""The one way a study goes: read -> Demand, Sites -> Reach -> model -> Plan -> audit.

Tools and the study runner call these steps with converted parameter
groups (see :mod:`geocover.toolbox.options`), checked first by
:mod:`geocover.toolbox.checks`.  This module is the toolbox's edge: it
reads layers and calls the core; :mod:`geocover.toolbox.results` writes
what comes out.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from ..choices import ModelKind, ServiceMetric
from ..values import Demand, Plan, Reach, ScreeningRecord, Sites
from .tool import RunContext

__all__ = [
    "StudyOutcome",
    "load_demand",
    "load_sites",
    "build_reach",
    "solve",
    "compute_tradeoff",
    "run_pipeline",
    "evaluate_given_sites",
]

logger = logging.getLogger(__name__)


# ----------------------------------------------------------------------------- steps


def load_demand(p: Mapping[str, Any], crs: Any, run: RunContext, coarsen: int | None = None) -> Demand:
    """Demand from whichever source the parameters name."""
    from .. import demand as demand_mod

    if p.get("grid") is not None:
        return demand_mod.demand_from_grid(
            p["grid"],
            p["band"],
            crs=crs,
            values=p["values"].value,
            coarsen=p["coarsen"] if coarsen is None else coarsen,
            clip=p.get("clip"),
            clip_mode=p["clip_mode"].value,
            bad_values=p["bad_values"].value,
        )
    if p.get("areas") is not None:
        return demand_mod.demand_from_areas(
            p["areas"],
            p["population"],
            placement=p["placement"].value,
            weight_raster=p.get("weight_raster"),
            spacing_m=p.get("spread_spacing"),
            crs=crs,
        )
    return demand_mod.demand_from_points(p["points"], p["population"], crs=crs)


def load_sites(p: Mapping[str, Any], crs: Any, run: RunContext) -> tuple[Sites, ScreeningRecord]:
    from .. import sites as sites_mod

    candidates = p.get("candidates")
    if candidates is None and p.get("lattice_spacing") is not None:
        candidates = sites_mod.lattice_candidates(
            p["study_area"], p["lattice_spacing"], shape=p["lattice_shape"].value, crs=crs
        )
    land_use = None
    if p.get("land_use") is not None:
        land_use = sites_mod.LandUseMask(
            p["land_use"], allowed=p.get("allowed_classes"), forbidden=p.get("forbidden_classes"), min_share=p["min_share"]
        )
    return sites_mod.screen_sites(
        candidates,
        exclude=p.get("exclude") or (),
        land_use=land_use,
        existing=p.get("existing"),
        existing_role_field=p.get("existing_role_field"),
        existing_role=p["existing_role"].value,
        cost_field=p.get("cost_field"),
        default_cost=p["default_cost"],
        study_area=p.get("study_area"),
        min_spacing_m=p.get("min_spacing"),
        label_field=p.get("label_field"),
        existing_label_field=p.get("existing_label_field"),
        crs=crs,
        threads=p.get("screen_threads"),
    )


def build_reach(p: Mapping[str, Any], demand: Demand, sites: Sites, run: RunContext) -> Reach:
    metric = p["metric"]
    if metric == ServiceMetric.NETWORK:
        from ..network import reach_network

        return reach_network(
            demand,
            sites,
            p["roads"],
            p["time"],
            speed_field=p.get("speed_field"),
            class_field=p.get("class_field"),
            oneway_field=p.get("oneway_field"),
            offroad_speed_kmh=p["offroad_speed_kmh"],
            max_snap_m=p["max_snap"],
            turn_penalty_s=p["turn_penalty"],
            memory_budget_gb=p["memory_gb"],
            workers=p.get("road_processes"),
        )
    from .. import coverage

    if metric == ServiceMetric.GEODESIC:
        from pyproj import CRS

        if demand.crs is not None and not CRS.from_user_input(demand.crs).is_geographic:
            # geodesic and planar distances differ by well under 1 % in a local projected CRS
            pairs = coverage.estimate_pairs(demand, sites, 1.01 * p["distance"])
            coverage.check_memory(pairs, p["memory_gb"], len(demand), "geodesic coverage")
        return coverage.reach_geodesic(demand, sites, p["distance"])
    return coverage.reach_planar(demand, sites, p["distance"], memory_budget_gb=p["memory_gb"])


def _solver_options(p: Mapping[str, Any]) -> dict[str, Any]:
    return {
        "time_limit": p["time_limit"],
        "rel_gap": p["gap"],
        "threads": p["threads"],
        "seed": p["seed"],
        "solver": p["solver"].value,
    }


def solve(p: Mapping[str, Any], kind: ModelKind, reach: Reach, run: RunContext) -> Plan:
    from .. import models

    opts = _solver_options(p)
    if kind == ModelKind.COVER_ALL:
        return models.cover_all(reach, use_cost=not p["fewest"], **opts)
    if kind == ModelKind.COVER_MOST:
        return models.cover_most(reach, sites=p.get("sites"), budget=p.get("budget"), **opts)
    if kind == ModelKind.COVER_TARGET:
        return models.cover_target(reach, p["share"], **opts)
    return models.cover_twice(reach, sites=p["sites"], first_floor=p["first_floor"], **opts)


def compute_tradeoff(p: Mapping[str, Any], reach: Reach, max_sites: int) -> Any:
    """The trade-off curve (a :class:`geocover.models.Tradeoff`)."""
    from .. import models

    return models.tradeoff(reach, max_sites, **_solver_options(p))


# ----------------------------------------------------------------------------- the whole study


@dataclass
class StudyOutcome:
    """Everything a study produced, before writing."""

    title: str
    kind: str
    params: dict[str, dict[str, Any]]
    demand: Demand
    full_demand: Demand | None
    sites: Sites
    record: ScreeningRecord
    reach: Reach
    plan: Plan
    today: dict[str, float]
    audit: dict[str, Any] | None
    curve: Any  # a geocover.models.Tradeoff, or None
    service_polygons: list[Any]
    study_area: Any
    exclusion_geoms: list[Any]
    notes: list[str] = field(default_factory=list)


def _study_area_geometry(ref: Any, crs: Any) -> Any:
    """The study area (for clipping service areas), repaired as screening and the demand clip repair it.

    Unrepaired, a self-intersecting polygon clipped the service areas to
    nothing (a bow tie's own area is 0) or stopped the study with a GEOS
    topology error.  The repair was reported when the layer was read for the
    demand or the sites, so it is not reported again here.
    """
    if ref is None:
        return None
    from ..layers import read_vector, to_crs
    from ..sites import _area_geometry

    frame = to_crs(read_vector(ref, "study_area"), crs, "study_area")
    return _area_geometry(frame, [])


def _prepare(sections: Mapping[str, Mapping[str, Any]], run: RunContext) -> tuple[Demand, Sites, ScreeningRecord, Reach]:
    crs = sections["study"].get("crs")
    with run.step("reading demand"):
        demand = load_demand(sections["demand"], crs, run)
    logger.info("demand: %d points, %.0f people, working CRS %s", len(demand), demand.total, demand.crs)
    if demand.total <= 0:
        logger.warning(
            "demand: the demand source holds no people (%d points); check the band, its nodata value, the clip "
            "layer and the population field", len(demand),
        )
    with run.step("screening sites"):
        sites, record = load_sites(sections["sites"], demand.crs, run)
    logger.info("sites: %d usable (%s)", len(sites), record.counts())
    with run.step("building coverage"):
        reach = build_reach(sections["service"], demand, sites, run)
    logger.info("coverage: %d covering pairs", reach.matrix.nnz)
    return demand, sites, record, reach


def _finish(
    sections: Mapping[str, Mapping[str, Any]],
    kind: str,
    title: str,
    run: RunContext,
    prepared: tuple[Demand, Sites, ScreeningRecord, Reach],
    plan: Plan,
    curve: Any,
) -> StudyOutcome:
    from ..areas import service_areas
    from ..evaluate import audit, coverage_of, existing_sites

    demand, sites, record, reach = prepared
    dp, sp_, svc = sections["demand"], sections["sites"], sections["service"]
    today = coverage_of(reach, existing_sites(reach))
    full_demand = None
    audit_summary = None
    if dp.get("grid") is not None and (dp.get("coarsen") or 1) > 1:
        with run.step("full-resolution audit"):
            full_demand = load_demand(dp, demand.crs, run, coarsen=1)
            rebuild = None
            if svc["metric"] == ServiceMetric.NETWORK:
                def rebuild(full: Demand, chosen_sites: Sites) -> Reach:
                    return build_reach(svc, full, chosen_sites, run)

            audit_summary = audit(plan, full_demand, reach=reach, reach_fn=rebuild).summary()
    study_area = _study_area_geometry(sp_.get("study_area") or dp.get("clip"), demand.crs)
    with run.step("service areas"):
        service_polygons = list(service_areas(reach, plan.sites, clip=study_area))
    exclusion_geoms = [g for geoms in record.zones.values() for g in geoms]
    notes = [str(n) for n in demand.summary.get("notes", [])] + [str(n) for n in record.notes]
    if demand.total <= 0:
        notes.insert(0, "The demand holds no people: check the band, its nodata value, the clip layer and the population field.")
    return StudyOutcome(
        title=title,
        kind=kind,
        params={k: dict(v) for k, v in sections.items()},
        demand=demand,
        full_demand=full_demand,
        sites=sites,
        record=record,
        reach=reach,
        plan=plan,
        today=today,
        audit=audit_summary,
        curve=curve,
        service_polygons=service_polygons,
        study_area=study_area,
        exclusion_geoms=exclusion_geoms,
        notes=notes,
    )


def run_pipeline(
    sections: Mapping[str, Mapping[str, Any]],
    kind: ModelKind,
    run: RunContext,
    title: str = "geocover study",
) -> StudyOutcome:
    """Run one study from converted parameter groups ``study``, ``demand``, ``sites``, ``service``, ``model``."""
    prepared = _prepare(sections, run)
    reach = prepared[3]
    mp = sections["model"]
    with run.step("solving"):
        plan = solve(mp, kind, reach, run)
    curve = None
    if mp.get("tradeoff"):
        with run.step("trade-off curve"):
            curve = compute_tradeoff(mp, reach, int(mp["tradeoff"]))
    return _finish(sections, kind.value, title, run, prepared, plan, curve)


def evaluate_given_sites(sections: Mapping[str, Mapping[str, Any]], run: RunContext, title: str = "geocover audit") -> StudyOutcome:
    """Evaluate every usable site as open (e.g. today's stations): no model is solved."""
    from ..evaluate import plan_from_sites

    prepared = _prepare(sections, run)
    reach = prepared[3]
    plan = plan_from_sites(reach, np.arange(reach.shape[1]), model="audit")
    return _finish(sections, "audit", title, run, prepared, plan, None)
