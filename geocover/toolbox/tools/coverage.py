"""coverage: which sites serve which demand, by straight line, geodesic or road travel time."""

from __future__ import annotations

from typing import Any

from ..params import OutputPath
from ..tool import RunContext, Tool, ToolResult
from ._common import params_of, split_sections


def _validate(p: dict[str, Any]) -> list[Any]:
    from ..checks import check_demand, check_distance_units, check_service, check_sites

    problems = check_demand(p) + check_sites(p) + check_service(p)
    return problems or check_distance_units(p, p)


def run(p: dict[str, Any], run: RunContext) -> ToolResult:
    from ...layers import write_layers
    from ...outputs import coverage_frames
    from ..pipeline import build_reach, load_demand, load_sites
    from ..results import input_files

    sec = split_sections(p, ("study", "demand", "sites", "service"))
    with run.step("reading demand"):
        demand = load_demand(sec["demand"], p.get("crs"), run)
    with run.step("screening sites"):
        sites, _record = load_sites(sec["sites"], demand.crs, run)
    with run.step("building coverage"):
        reach = build_reach(sec["service"], demand, sites, run)
    with run.step("writing layers"):
        write_layers(p["out"], coverage_frames(reach), inputs=tuple(input_files(p)))
    lines = [
        f"coverage: {reach.matrix.nnz:,} covering pairs between {reach.shape[0]:,} demand points and {reach.shape[1]:,} sites",
        f"  {reach.uncoverable_weight:,.0f} of {float(reach.weight.sum()):,.0f} people are beyond reach of every site",
        f"  written to {p['out']} (layers 'sites_reach', 'demand_reach', table 'coverage_pairs')",
    ]
    return ToolResult("coverage", {"layers": p["out"]}, {"pairs": int(reach.matrix.nnz)}, lines, reach)


TOOL = Tool(
    id="coverage",
    summary="which sites can serve which people within a distance or travel time",
    params=params_of("study", "demand", "sites", "service") + (OutputPath("out", "output GeoPackage", "coverage.gpkg"),),
    outputs=("sites_reach", "demand_reach", "coverage_pairs"),
    run_fn=run,
    validate=_validate,
)
