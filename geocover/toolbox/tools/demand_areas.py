"""demand-areas: polygons (or points) with a population field to weighted demand points."""

from __future__ import annotations

from typing import Any

from ...errors import ParameterError
from ..params import OutputPath
from ..tool import RunContext, Tool, ToolResult
from ._common import params_of

_DEMAND_KEYS = ("areas", "points", "population", "placement", "weight_raster", "spread_spacing")


def _validate(p: dict[str, Any]) -> list[ParameterError]:
    problems = []
    if (p.get("areas") is None) == (p.get("points") is None):
        problems.append(ParameterError("give exactly one of 'areas' (polygons) or 'points'", "areas"))
    if not p.get("population"):
        problems.append(ParameterError("parameter 'population' is required: the field with the people", "population"))
    return problems


def run(p: dict[str, Any], run: RunContext) -> ToolResult:
    from ...layers import write_layers
    from ...outputs import demand_frame
    from ..pipeline import load_demand
    from ..results import input_files

    with run.step("reading demand"):
        demand = load_demand(p, p.get("crs"), run)
    with run.step("writing layers"):
        write_layers(p["out"], {"demand": demand_frame(demand)}, inputs=tuple(input_files(p)))
    lines = [
        f"demand-areas: {len(demand):,} demand points, {demand.total:,.0f} people",
        f"  working CRS {demand.crs}; written to {p['out']} (layer 'demand')",
    ]
    return ToolResult("demand-areas", {"layers": p["out"]}, dict(demand.summary), lines, demand)


TOOL = Tool(
    id="demand-areas",
    summary="areas or points with a population field -> demand points (centroid, inside, spread)",
    params=params_of("study") + tuple(p for p in params_of("demand") if p.name in _DEMAND_KEYS)
    + (OutputPath("out", "output GeoPackage", "demand.gpkg"),),
    outputs=("demand",),
    run_fn=run,
    validate=_validate,
)
