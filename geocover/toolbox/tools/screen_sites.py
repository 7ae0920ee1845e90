"""screen-sites: candidate sites minus exclusion zones and disallowed land use, every verdict explained."""

from __future__ import annotations

from typing import Any

from ..params import OutputPath
from ..tool import RunContext, Tool, ToolResult
from ._common import params_of


def run(p: dict[str, Any], run: RunContext) -> ToolResult:
    from ...layers import write_layers
    from ...outputs import screened_sites_layer
    from ...outputs import sites_frame
    from ..pipeline import load_sites
    from ..results import input_files

    with run.step("screening sites"):
        sites, record = load_sites(p, p.get("crs"), run)
    with run.step("writing layers"):
        write_layers(
            p["out"],
            {"screened_sites": screened_sites_layer(record, None, sites), "sites": sites_frame(sites)},
            inputs=tuple(input_files(p)),
        )
    counts = record.counts()
    lines = [f"screen-sites: {len(sites):,} usable sites of {len(record):,} ({', '.join(f'{k} {v}' for k, v in counts.items())})",
             f"  written to {p['out']} (layers 'screened_sites', 'sites')"]
    return ToolResult("screen-sites", {"layers": p["out"]}, {"verdicts": counts, "usable": len(sites)}, lines, (sites, record))


def _validate(p: dict[str, Any]) -> list[Any]:
    from ..checks import check_sites

    return check_sites(p)


TOOL = Tool(
    id="screen-sites",
    summary="candidate sites minus exclusion zones (with setbacks) and disallowed land use",
    params=params_of("study", "sites") + (OutputPath("out", "output GeoPackage", "sites.gpkg"),),
    outputs=("screened_sites", "sites"),
    run_fn=run,
    validate=_validate,
)
