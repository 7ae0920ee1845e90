"""study: a whole study from one TOML file, start to finish."""

from __future__ import annotations

from typing import Any

from ..params import OutputFolder, Param
from ..tool import RunContext, Tool, ToolResult


class _StudyFile(Param):
    def convert(self, value: Any, ctx: Any) -> Any:
        from pathlib import Path

        path = ctx.resolve(Path(value))
        if path.suffix.lower() != ".toml":
            raise self.fail(f"{path} is not a .toml study file")
        if not path.is_file():
            raise self.fail(f"study file {path} does not exist")
        return path


def run(p: dict[str, Any], run: RunContext) -> ToolResult:
    from ..results import summary_lines
    from ..study import run_study

    outcome, outputs = run_study(p["file"], p.get("out"), run)
    lines = summary_lines(outcome) + [f"  written to {outputs['layers'].parent}: " + ", ".join(o.name for o in outputs.values())]
    return ToolResult("study", outputs, outcome.plan.summary(), lines, outcome)


TOOL = Tool(
    id="study",
    summary="a whole study from one TOML file: demand, screening, coverage, model, layers, report",
    params=(
        _StudyFile("file", "the study file (.toml)", type_name="study file"),
        OutputFolder("out", "output folder (default: the one the study file names)", None),
    ),
    outputs=("<study>.gpkg", "report.html", "manifest.json"),
    run_fn=run,
)
