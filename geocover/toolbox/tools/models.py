"""The model tools: cover-all (LSCP), cover-most (MCLP), cover-target, cover-twice (backup) and tradeoff.

They share one shape (demand, sites, service rule, model settings, output
folder) and differ in the model they solve, so they live together.
"""

from __future__ import annotations

from typing import Any, Callable

from ...choices import ModelKind
from ..params import Text
from ..tool import RunContext, Tool, ToolResult
from ._common import params_of, split_sections

_ALL_GROUPS = ("study", "demand", "sites", "service", "model")


def _validator(kind: ModelKind) -> Callable[[dict[str, Any]], list[Any]]:
    def validate(p: dict[str, Any]) -> list[Any]:
        from ..checks import check_demand, check_distance_units, check_model, check_service, check_sites

        problems = check_demand(p) + check_sites(p) + check_service(p) + check_model(p, kind)
        return problems or check_distance_units(p, p)

    return validate


def _runner(kind: ModelKind, tradeoff_only: bool = False) -> Callable[[dict[str, Any], RunContext], ToolResult]:
    def run(p: dict[str, Any], run: RunContext) -> ToolResult:
        from ..pipeline import run_pipeline
        from ..results import summary_lines, write_outputs

        sections = split_sections(p, _ALL_GROUPS)
        if tradeoff_only:
            sections["model"]["tradeoff"] = p["max_sites"]
            sections["model"]["sites"] = p["max_sites"]
        outcome = run_pipeline(sections, kind, run, title=p["title"])
        name = "tradeoff" if tradeoff_only else kind.value.replace("-", "_")
        outputs = write_outputs(outcome, p["out"], run, name=name)
        lines = summary_lines(outcome) + [f"  written to {p['out']}: " + ", ".join(o.name for o in outputs.values())]
        return ToolResult(kind.value, outputs, outcome.plan.summary(), lines, outcome)

    return run


def _tool(tool_id: str, kind: ModelKind, summary: str, drop: tuple[str, ...]) -> Tool:
    return Tool(
        id=tool_id,
        summary=summary,
        params=(Text("title", "a title for the report", "geocover study"),)
        + params_of(*_ALL_GROUPS[:-1])
        + params_of("model", drop=("kind",) + drop)
        + params_of("output"),
        outputs=("plan_sites", "service_areas", "covered_area", "demand", "uncovered", "uncovered_areas", "screened_sites", "report.html", "manifest.json"),
        run_fn=_runner(kind),
        validate=_validator(kind),
    )


COVER_ALL = _tool("cover-all", ModelKind.COVER_ALL, "LSCP: fewest (or cheapest) sites so every coverable person is served",
                  ("sites", "budget", "share", "first_floor"))
COVER_MOST = _tool("cover-most", ModelKind.COVER_MOST, "MCLP: the best p new sites (or a budget) for the most people served",
                   ("share", "first_floor", "fewest"))
COVER_TARGET = _tool("cover-target", ModelKind.COVER_TARGET, "least cost to serve a given share of the coverable people",
                     ("sites", "budget", "first_floor", "fewest"))
COVER_TWICE = _tool("cover-twice", ModelKind.COVER_TWICE, "backup coverage: most people served twice, after a first-coverage floor",
                    ("budget", "share", "fewest"))


def _tradeoff_tool() -> Tool:
    from ..params import Number

    base = _tool("tradeoff", ModelKind.COVER_MOST, "", ("sites", "budget", "share", "first_floor", "fewest", "tradeoff"))
    return Tool(
        id="tradeoff",
        summary="people served against number of sites, each point solved exactly (or with its gap)",
        params=base.params + (Number("max_sites", "largest number of new sites on the curve", 10, minimum=1, integer=True),),
        outputs=base.outputs,
        run_fn=_runner(ModelKind.COVER_MOST, tradeoff_only=True),
        validate=_validator(ModelKind.COVER_ALL),  # sites/budget are set from max_sites
    )


TRADEOFF = _tradeoff_tool()
