"""audit: how well a given set of sites (e.g. today's stations) serves the demand."""

from __future__ import annotations

from typing import Any

from ..params import Text
from ..tool import RunContext, Tool, ToolResult
from ._common import params_of, split_sections


def _validate(p: dict[str, Any]) -> list[Any]:
    from ..checks import check_demand, check_distance_units, check_service, check_sites

    problems = check_demand(p) + check_sites(p) + check_service(p)
    return problems or check_distance_units(p, p)


def run(p: dict[str, Any], run: RunContext) -> ToolResult:
    from ..pipeline import evaluate_given_sites
    from ..results import summary_lines, write_outputs

    sections = split_sections(p, ("study", "demand", "sites", "service"))
    outcome = evaluate_given_sites(sections, run, title=p["title"])
    outputs = write_outputs(outcome, p["out"], run, name="audit")
    lines = summary_lines(outcome) + [f"  written to {p['out']}: " + ", ".join(o.name for o in outputs.values())]
    return ToolResult("audit", outputs, outcome.plan.summary(), lines, outcome)


TOOL = Tool(
    id="audit",
    summary="coverage of a given set of sites (e.g. today's stations), at full resolution",
    params=(Text("title", "a title for the report", "geocover audit"),) + params_of("study", "demand", "sites", "service", "output"),
    outputs=("plan_sites", "service_areas", "covered_area", "demand", "uncovered", "uncovered_areas", "screened_sites", "report.html", "manifest.json"),
    run_fn=run,
    validate=_validate,
)

