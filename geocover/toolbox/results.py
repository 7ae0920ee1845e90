"""What a study hands to people: the output files, the manifest, the report's content and the CLI summary."""

from __future__ import annotations

import json
import logging
import math
import os
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from ..choices import ModelKind
from ..values import Reach, SiteRole
from .pipeline import StudyOutcome
from .tool import RunContext

__all__ = [
    "jsonable",
    "input_files",
    "build_manifest",
    "report_data",
    "write_outputs",
    "summary_lines",
    "infeasible_hint",
    "tradeoff_rows",
    "tradeoff_marks",
]

logger = logging.getLogger(__name__)


def tradeoff_rows(curve: Any, reach: Reach) -> list[dict[str, Any]]:
    """The curve as plain rows, the LSCP end point last (``p`` counts new sites, as on the curve)."""
    if curve is None:
        return []
    rows = curve.rows()
    if curve.lscp is not None:
        lscp = curve.lscp
        coverable = curve.coverable_weight or 1.0
        new_sites = int((reach.role[lscp.sites] == SiteRole.CANDIDATE).sum())
        rows.append({"p": new_sites, "covered": lscp.covered_weight, "share": lscp.covered_weight / coverable,
                     "bound": float("nan"), "gap": lscp.gap, "status": f"{lscp.status.value} (cover-all end point)"})
    return rows


def tradeoff_marks(curve: Any) -> dict[str, Any]:
    """Smallest number of new sites reaching each coverage level, and whether it is proven smallest.

    A level no point of the curve reaches reads ``"more than P"``.
    """
    if curve is None:
        return {}
    top = int(curve.p.max()) if len(curve.p) else 0
    return {
        f"{round(level * 100)} %": (f"more than {top}" if p is None else int(p), bool(curve.marks_exact.get(level, False)))
        for level, p in curve.marks.items()
    }


def jsonable(value: Any) -> Any:
    """Parameters and summaries as JSON values (paths as text, enums as their value)."""
    import enum

    from ..layers import LayerRef

    if isinstance(value, enum.Enum):
        return value.value
    if isinstance(value, (Path, LayerRef)):
        return str(value)
    if isinstance(value, Mapping):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if hasattr(value, "__dataclass_fields__"):
        return {k: jsonable(getattr(value, k)) for k in value.__dataclass_fields__}
    if hasattr(value, "geometry") and hasattr(value, "crs"):
        return f"<GeoDataFrame with {len(value)} features>"
    return value


def input_files(params: Mapping[str, Any]) -> list[Path]:
    """Every input file named anywhere in the parameters, once, in order."""
    from ..layers import LayerRef

    found: list[Path] = []

    def walk(value: Any) -> None:
        if isinstance(value, LayerRef):
            found.append(value.path)
        elif isinstance(value, Path):
            found.append(value)
        elif isinstance(value, Mapping):
            for v in value.values():
                walk(v)
        elif isinstance(value, (list, tuple)):
            for v in value:
                walk(v)
        elif hasattr(value, "layer") and hasattr(value, "setback_m"):
            walk(value.layer)
        elif hasattr(value, "raster") and hasattr(value, "min_share"):
            walk(value.raster)

    walk({k: v for k, v in params.items() if k not in ("output", "out")})  # a tool's own output is not an input
    unique: list[Path] = []
    for path in found:
        resolved = path.resolve()
        if resolved not in unique and resolved.is_file():
            unique.append(resolved)
    return unique


def inputs_manifest(params: Mapping[str, Any]) -> list[dict[str, Any]]:
    from ..layers import file_digest

    return [{"path": str(p), "bytes": p.stat().st_size, "sha256": file_digest(p)} for p in input_files(params)]


def people_totals(outcome: StudyOutcome) -> dict[str, float]:
    """People at each step: read, turned into demand, within reach of a site left after screening, covered."""
    plan = outcome.plan
    return {
        "people_in": float(outcome.demand.summary.get("people_in", outcome.demand.total)),
        "people_as_demand": outcome.demand.total,
        "people_reachable_after_screening": outcome.demand.total - plan.uncoverable_weight,
        "people_covered": plan.covered_weight,
        "people_left_out": plan.left_out_weight,
        "people_unreachable": plan.uncoverable_weight,
    }


def build_manifest(
    outcome: StudyOutcome, run: RunContext, outputs: Mapping[str, Path], inputs: list[dict[str, Any]]
) -> dict[str, Any]:
    """The manifest; ``inputs`` from :func:`inputs_manifest` (hashed once per study)."""
    from ..versions import show_versions

    plan = outcome.plan
    return {
        "geocover_manifest": 1,
        "title": outcome.title,
        "model": outcome.kind,
        "working_crs": outcome.demand.crs,
        "service_rule": outcome.reach.rule.describe(),
        "inputs": inputs,
        "parameters": jsonable(outcome.params),
        "demand_summary": jsonable(outcome.demand.summary),
        "screening": outcome.record.counts(),
        "plan": jsonable(plan.summary()),
        "chosen_sites": [str(s) for s in outcome.sites.label[plan.sites]],
        "people": people_totals(outcome),
        "today": outcome.today,
        "audit": jsonable(outcome.audit),
        "tradeoff": jsonable(tradeoff_rows(outcome.curve, outcome.reach)),
        "tradeoff_marks": jsonable(tradeoff_marks(outcome.curve)),
        "outputs": {k: Path(v).name for k, v in outputs.items()},
        "versions": show_versions(),
        "timings_s": dict(run.timings),
    }


def report_data(outcome: StudyOutcome, inputs: list[dict[str, Any]]) -> Any:
    from ..evaluate import coverage_of, site_figures
    from ..outputs import demand_status
    from ..report import ReportData

    plan, reach, sites = outcome.plan, outcome.reach, outcome.sites
    figures = site_figures(reach, plan.sites)
    role_names = {int(r): r.label for r in SiteRole}
    sites_table = [
        {
            "site": str(sites.label[j]),
            "role": role_names[int(sites.role[j])],
            "cost": float(sites.cost[j]),
            "people covered": float(figures.covered[k]),
            "people only this site covers": float(figures.unique[k]),
            "greedy rank": int(figures.rank[k]),
        }
        for k, j in enumerate(plan.sites)
    ]
    sites_table.sort(key=lambda row: row["greedy rank"])
    planned = coverage_of(reach, plan.sites)
    today_vs_plan = [
        {"": "today (existing facilities)", "sites": outcome.today["sites"], "people covered": outcome.today["covered"],
         "share of people": f"{100 * outcome.today['share_of_total']:.1f} %"},
        {"": "with the plan", "sites": planned["sites"], "people covered": planned["covered"],
         "share of people": f"{100 * planned['share_of_total']:.1f} %"},
    ]
    status = demand_status(reach, plan)
    demand = outcome.demand
    existing = np.flatnonzero(np.isin(sites.role, [SiteRole.KEPT, SiteRole.OPTIONAL]))
    summary = {
        "sites in the plan": len(plan.sites),
        "of which existing": int(np.isin(plan.sites, existing).sum()),
        "people in the study": plan.total_weight,
        "people covered": plan.covered_weight,
        "share covered": f"{100 * plan.covered_weight / plan.total_weight:.1f} %" if plan.total_weight else "-",
        "people no site can reach": plan.uncoverable_weight,
        "people the plan leaves out": plan.left_out_weight,
        "objective": plan.objective,
        "proven bound": plan.bound,
        "gap": f"{100 * plan.gap:.2f} %",
        "solver status": plan.status.value,
        "solver": plan.solver,
        "solve seconds": plan.seconds,
    }
    # side of a demand cell: the footprint is half its diagonal
    cell = float(np.median(demand.footprint) * math.sqrt(2.0)) if len(demand) and demand.footprint.any() else 100.0
    return ReportData(
        title=outcome.title,
        crs=str(outcome.demand.crs),
        rule=reach.rule.describe(),
        model=outcome.kind,
        plan_summary=summary,
        sites_table=sites_table,
        today_vs_plan=today_vs_plan,
        uncovered_by_reason={"unreachable": plan.uncoverable_weight, "left_out": plan.left_out_weight},
        audit=outcome.audit,
        screening=outcome.record.counts(),
        parameters={f"{sec}.{k}": jsonable(v) for sec, vals in outcome.params.items() for k, v in vals.items() if v not in (None, ())},
        inputs=[{"file": Path(i["path"]).name, "bytes": i["bytes"], "sha256": i["sha256"][:16] + "..."} for i in inputs],
        notes=([f"Infeasible: {infeasible_hint(outcome)}"] if infeasible_hint(outcome) else [])
        + list(outcome.notes) + list(plan.log),
        tradeoff=tradeoff_rows(outcome.curve, outcome.reach),
        tradeoff_marks=tradeoff_marks(outcome.curve),
        demand_xy=demand.xy,
        demand_weight=demand.weight,
        demand_cell_m=cell,
        study_area=outcome.study_area,
        exclusions=outcome.exclusion_geoms,
        service_areas=outcome.service_polygons,
        chosen_xy=sites.xy[plan.sites],
        existing_xy=sites.xy[existing],
        unreachable_xy=demand.xy[(status == "unreachable") & (demand.weight > 0)],
        left_out_xy=demand.xy[(status == "left_out") & (demand.weight > 0)],
    )


def write_outputs(outcome: StudyOutcome, out_dir: Path, run: RunContext, name: str = "study") -> dict[str, Path]:
    """Write ``NAME.gpkg``, ``report.html`` and ``manifest.json`` into ``out_dir`` as one set.

    All three are written into a hidden staging folder inside ``out_dir``
    first and moved into place only when every one is complete, so an error
    or a Ctrl-C while writing leaves the previous output untouched (never a
    new GeoPackage beside an old report).  A Ctrl-C during the final moves
    completes them before it is passed on.  The staging folder is always
    removed; one left by a run that was killed outright (its process gone)
    is removed by the next run into the same folder.
    """
    import contextlib
    import shutil
    import tempfile

    from ..errors import OutputError
    from ..layers import atomic_output, clear_leftovers, owner_tag, write_layers
    from ..outputs import study_layers
    from ..report import write_report

    out_dir = Path(out_dir)
    inputs = tuple(input_files(outcome.params))
    outputs = {"layers": out_dir / f"{name}.gpkg", "report": out_dir / "report.html", "manifest": out_dir / "manifest.json"}
    for target in outputs.values():  # refuse before any work, not after the first file
        with contextlib.suppress(OSError):
            if target.resolve() in {Path(src).resolve() for src in inputs}:
                raise OutputError(f"output {target.resolve()} is also an input; choose another output folder or name")
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
        clear_leftovers(out_dir, f".{name}.staging")  # of a run killed while writing (kill -9, a power cut)
        staging = Path(tempfile.mkdtemp(prefix=f".{name}.staging.{owner_tag()}.", dir=out_dir))
    except OSError as exc:
        raise OutputError(f"cannot write into the output folder {out_dir} ({exc}); choose another one (--out)") from exc
    try:
        staged = {key: staging / path.name for key, path in outputs.items()}
        try:
            with run.step("writing layers"):
                layers = study_layers(outcome.reach, outcome.plan, outcome.record, outcome.service_polygons)
                write_layers(staged["layers"], layers)
            with run.step("hashing inputs"):
                hashed = inputs_manifest(outcome.params)
            with run.step("writing report"):
                write_report(staged["report"], report_data(outcome, hashed))
            manifest = build_manifest(outcome, run, outputs, hashed)
            with atomic_output(staged["manifest"]) as tmp:
                tmp.write_text(json.dumps(manifest, indent=2, sort_keys=False) + os.linesep, encoding="utf-8")
        except OSError as exc:  # disk full, no permission...: say where, and that nothing was replaced
            raise OutputError(
                f"cannot write the outputs into {out_dir} ({exc}); the previous output there is left as it was"
            ) from exc
        pending = [(staged[key], outputs[key]) for key in ("layers", "report", "manifest")]
        try:
            while pending:
                os.replace(*pending[0])
                pending.pop(0)
        except KeyboardInterrupt:  # every file is complete: finish the set, then stop
            for src, dst in pending:
                if src.exists():
                    os.replace(src, dst)
            raise
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return outputs


def infeasible_hint(outcome: StudyOutcome) -> str | None:
    """What to change when no plan satisfies the model's constraints."""
    if outcome.plan.status.value != "infeasible":
        return None
    mp, sp_ = outcome.params.get("model", {}), outcome.params.get("sites", {})
    spacing = sp_.get("min_spacing")
    relax = f"relax 'min_spacing' ({spacing:g} m) or " if spacing else ""
    if outcome.kind == ModelKind.COVER_TWICE.value:
        return (f"no plan covers {100 * mp.get('first_floor', 0):.0f} % of the people once with {mp.get('sites')} new "
                f"sites: {relax}lower 'first_floor' or raise 'sites'")
    if outcome.kind == ModelKind.COVER_TARGET.value:
        return f"no plan reaches the coverage 'share' asked for: {relax}lower 'share'"
    if spacing:
        return (f"the spacing rule leaves some coverable people with no site that may open next to the kept ones: "
                f"relax 'min_spacing' ({spacing:g} m) or make the nearby existing facilities optional")
    return "the constraints admit no plan; check the kept sites, the budget and the spacing rule"


def summary_lines(outcome: StudyOutcome) -> list[str]:
    """The short summary the CLI prints."""
    plan = outcome.plan
    total = plan.total_weight or 1.0
    chosen = ", ".join(str(s) for s in outcome.sites.label[plan.sites][:12])
    more = "" if len(plan.sites) <= 12 else f" and {len(plan.sites) - 12} more"
    lines = [
        f"{outcome.title}: {outcome.kind}, {outcome.reach.rule.describe()}",
        *(["  warning:            the demand holds no people; check the band, nodata, clip and population field"]
          if outcome.demand.total <= 0 else []),
        f"  sites chosen:       {len(plan.sites)} ({chosen}{more})",
        f"  people served:      {plan.covered_weight:,.0f} of {plan.total_weight:,.0f} ({100 * plan.covered_weight / total:.1f} %)",
        f"  people uncovered:   {plan.left_out_weight + plan.uncoverable_weight:,.0f} "
        f"({plan.uncoverable_weight:,.0f} beyond reach of any site, {plan.left_out_weight:,.0f} left out by the plan)",
        f"  today's facilities: {outcome.today['covered']:,.0f} people ({100 * outcome.today['share_of_total']:.1f} %)",
        f"  solver:             {plan.solver}, status {plan.status.value}, objective {plan.objective:,.6g}, "
        f"bound {plan.bound:,.6g}, gap {100 * plan.gap:.2f} %",
    ]
    if outcome.kind == ModelKind.COVER_TWICE.value:
        twice = float(plan.total_weight and outcome.reach.weight[plan.coverage_count >= 2].sum())
        lines.insert(3, f"  people served twice: {twice:,.0f} ({100 * twice / total:.1f} %)")
    if outcome.curve is not None:
        rows = tradeoff_rows(outcome.curve, outcome.reach)
        points = ", ".join(f"{r['p']}: {100 * r['share']:.1f} %" for r in rows if "end point" not in str(r["status"]))
        lines.append(f"  trade-off (new sites: share of coverable people): {points}")
        ends = [r for r in rows if "end point" in str(r["status"])]
        if ends:
            lines.append(f"  everyone coverable is served with {ends[0]['p']} new sites (cover-all end point)")
        marks = tradeoff_marks(outcome.curve)
        if marks:
            lines.append("  smallest number of new sites for " + ", ".join(f"{k}: {v[0]}" for k, v in marks.items()))
    hint = infeasible_hint(outcome)
    if hint:
        lines.append(f"  infeasible:         {hint}")
    if outcome.audit:
        a = outcome.audit
        bound = a["aggregation_error_bound"]
        bound_text = f"bound {bound:,.0f}" if bound is not None and math.isfinite(bound) else "no footprint bound for travel times"
        lines.append(
            f"  full-resolution:    {a['people_covered_full_resolution']:,.0f} people covered "
            f"(aggregation error {a['aggregation_error']:+,.0f}, {bound_text})"
        )
    return lines
