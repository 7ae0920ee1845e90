"""Rules that span several parameters, checked before any work starts.

Each check takes a converted parameter group and returns every problem it
finds as :class:`~geocover.errors.ParameterError` (never raises), so that a
tool or a study file can report all of them at once.
"""

from __future__ import annotations

from typing import Any, Mapping

from ..choices import ModelKind, ServiceMetric
from ..errors import ParameterError

__all__ = ["check_demand", "check_sites", "check_service", "check_model", "check_distance_units"]


def check_demand(p: Mapping[str, Any]) -> list[ParameterError]:
    given = [k for k in ("grid", "areas", "points") if p.get(k) is not None]
    problems = []
    if len(given) != 1:
        problems.append(
            ParameterError(
                "demand: give exactly one of 'grid' (population raster), 'areas' (polygons with a population field) "
                f"or 'points' (points with a weight field); got {', '.join(given) or 'none'}",
                "grid",
            )
        )
    if (p.get("areas") is not None or p.get("points") is not None) and not p.get("population"):
        problems.append(ParameterError("demand: 'population' names the field that holds the people of each area or point", "population"))
    return problems


def check_sites(p: Mapping[str, Any]) -> list[ParameterError]:
    problems = []
    if p.get("candidates") is None and p.get("lattice_spacing") is None and p.get("existing") is None:
        problems.append(
            ParameterError("sites: give 'candidates' (a layer), 'lattice_spacing' (with 'study_area') or 'existing'", "candidates")
        )
    if p.get("lattice_spacing") is not None and p.get("study_area") is None:
        problems.append(ParameterError("sites: a lattice needs a 'study_area' to cover", "study_area"))
    if p.get("land_use") is not None and not (p.get("allowed_classes") or p.get("forbidden_classes")):
        problems.append(ParameterError("sites: with 'land_use' give 'allowed_classes' or 'forbidden_classes'", "allowed_classes"))
    if p.get("allowed_classes") and p.get("forbidden_classes"):
        problems.append(ParameterError("sites: give 'allowed_classes' or 'forbidden_classes', not both", "forbidden_classes"))
    return problems


def check_service(p: Mapping[str, Any]) -> list[ParameterError]:
    metric = p.get("metric")
    problems = []
    if metric == ServiceMetric.NETWORK:
        if p.get("time") is None:
            problems.append(ParameterError("service: network coverage needs a travel 'time', e.g. '8 min'", "time"))
        if p.get("roads") is None:
            problems.append(ParameterError("service: network coverage needs a 'roads' layer", "roads"))
        if p.get("speed_field") is None and p.get("class_field") is None:
            problems.append(ParameterError("service: name the roads' 'speed_field' (km/h) or 'class_field'", "speed_field"))
    elif p.get("distance") is None:
        problems.append(ParameterError(f"service: {metric.value if metric else 'planar'} coverage needs a 'distance', e.g. '5 km'", "distance"))
    return problems


def _source_crs(dp: Mapping[str, Any]) -> Any:
    """The CRS of the demand source, read from its metadata only (None when it cannot be read here)."""
    try:
        if dp.get("grid") is not None:
            import rasterio

            with rasterio.open(dp["grid"]) as src:
                return src.crs
        ref = dp.get("areas") if dp.get("areas") is not None else dp.get("points")
        if ref is None or not hasattr(ref, "path"):
            return getattr(ref, "crs", None)
        import pyogrio

        return pyogrio.read_info(ref.path, layer=ref.layer)["crs"]
    except Exception:  # the reader itself reports an unreadable source, with its own message
        return None


def check_distance_units(dp: Mapping[str, Any], svc: Mapping[str, Any]) -> list[ParameterError]:
    """Refuse a distance written without a unit when the demand is in a geographic CRS (degrees?)."""
    distance = svc.get("distance")
    if distance is None or not getattr(distance, "unitless", False):
        return []
    source = _source_crs(dp)
    if source is None:
        return []
    from pyproj import CRS

    crs = CRS.from_user_input(source)
    if not crs.is_geographic:
        return []
    return [
        ParameterError(
            f"service: 'distance' {float(distance):g} has no unit and the demand is in the geographic CRS "
            f"{crs.to_string()} (degrees); write it with a unit, e.g. '5 km' or '{float(distance):g} m'",
            "distance",
        )
    ]


def check_model(p: Mapping[str, Any], kind: ModelKind) -> list[ParameterError]:
    problems = []
    if kind == ModelKind.COVER_MOST and p.get("sites") is None and p.get("budget") is None:
        problems.append(ParameterError("cover-most: give 'sites' (how many new sites) or 'budget'", "sites"))
    if kind == ModelKind.COVER_MOST and p.get("sites") is not None and p.get("budget") is not None:
        problems.append(ParameterError("cover-most: give 'sites' or 'budget', not both; remove one of them", "budget"))
    if kind == ModelKind.COVER_TWICE and p.get("sites") is None:
        problems.append(ParameterError("cover-twice: give 'sites' (how many new sites)", "sites"))
    if kind == ModelKind.COVER_TARGET and p.get("share") is None:
        problems.append(ParameterError("cover-target: give the coverage 'share' to reach, e.g. '95 %'", "share"))
    return problems
