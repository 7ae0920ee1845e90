"""demand-grid: a population raster to weighted demand points."""

from __future__ import annotations

from typing import Any

from ...errors import ParameterError
from ..params import OutputPath
from ..tool import RunContext, Tool, ToolResult
from ._common import params_of

_DEMAND_KEYS = ("grid", "band", "values", "coarsen", "clip", "clip_mode", "bad_values")


def _validate(p: dict[str, Any]) -> list[ParameterError]:
    return [] if p.get("grid") is not None else [ParameterError("parameter 'grid' is required: the population raster", "grid")]


def run(p: dict[str, Any], run: RunContext) -> ToolResult:
    from ...layers import write_layers
    from ...outputs import demand_frame
    from ..pipeline import load_demand
    from ..results import input_files

    with run.step("reading demand"):
        demand = load_demand(p, p.get("crs"), run)
    with run.step("writing layers"):
        write_layers(p["out"], {"demand": demand_frame(demand)}, inputs=tuple(input_files(p)))
    s = demand.summary
    lines = [
        f"demand-grid: {len(demand):,} demand points, {demand.total:,.0f} people (in: {s.get('people_in', demand.total):,.0f})",
        f"  working CRS {demand.crs}; written to {p['out']} (layer 'demand')",
    ]
    return ToolResult("demand-grid", {"layers": p["out"]}, dict(s), lines, demand)


TOOL = Tool(
    id="demand-grid",
    summary="population raster -> weighted demand points (nodata, coarsening, clipping)",
    params=params_of("study") + tuple(p for p in params_of("demand") if p.name in _DEMAND_KEYS)
    + (OutputPath("out", "output GeoPackage", "demand.gpkg"),),
    outputs=("demand",),
    run_fn=run,
    validate=_validate,
)
