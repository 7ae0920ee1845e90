"""Render a study into one self-contained HTML file.

The maps and charts are PNGs drawn with matplotlib (Agg backend) and
embedded as base64, so the report opens with no network and no other files.
The palette is geocover's own (``geocover.styles.PALETTE``, shared with the layer styles).
"""

from __future__ import annotations

import base64
import html
import io
import logging
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from ..styles import PALETTE  # one palette for the report's map and the GeoPackage's layer styles

__all__ = ["CAUTION", "PALETTE", "ReportData", "render_report", "write_report", "map_png", "tradeoff_png"]

logger = logging.getLogger(__name__)

CAUTION = (
    "Results are planning aids, not decisions. Check them against local codes and standards, "
    "the authority having jurisdiction and licensed professional practice before siting any facility."
)


@dataclass
class ReportData:
    """Everything the report shows; plain values and arrays only."""

    title: str
    crs: str
    rule: str
    model: str
    plan_summary: dict[str, Any]
    sites_table: list[dict[str, Any]]
    today_vs_plan: list[dict[str, Any]]
    uncovered_by_reason: dict[str, float]
    audit: dict[str, Any] | None
    screening: dict[str, int]
    parameters: dict[str, Any]
    inputs: list[dict[str, Any]]
    notes: list[str] = field(default_factory=list)
    tradeoff: list[dict[str, Any]] = field(default_factory=list)
    tradeoff_marks: dict[str, Any] = field(default_factory=dict)
    # map content (working CRS)
    demand_xy: np.ndarray | None = None
    demand_weight: np.ndarray | None = None
    demand_cell_m: float = 100.0
    study_area: Any = None
    exclusions: Sequence[Any] = ()
    service_areas: Sequence[Any] = ()
    chosen_xy: np.ndarray | None = None
    existing_xy: np.ndarray | None = None
    unreachable_xy: np.ndarray | None = None
    left_out_xy: np.ndarray | None = None


def _png(fig: Any) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, bbox_inches="tight", facecolor=PALETTE["paper"])
    import matplotlib.pyplot as plt

    plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _nice_length(span: float) -> float:
    """A round scale-bar length near a fifth of the map width."""
    target = span / 5.0
    exp = 10 ** math.floor(math.log10(target))
    for step in (1, 2, 5, 10):
        if step * exp >= target:
            return step * exp
    return 10 * exp


def _draw_polygons(ax: Any, geoms: Sequence[Any], **style: Any) -> None:
    import shapely
    from matplotlib.patches import PathPatch
    from matplotlib.path import Path as MplPath

    for geom in geoms:
        if geom is None or shapely.is_empty(geom):
            continue
        for poly in shapely.get_parts(geom):
            if poly.geom_type != "Polygon":
                continue
            rings = [np.asarray(poly.exterior.coords)] + [np.asarray(r.coords) for r in poly.interiors]
            verts = np.concatenate(rings)
            codes = np.concatenate(
                [[MplPath.MOVETO] + [MplPath.LINETO] * (len(r) - 2) + [MplPath.CLOSEPOLY] for r in rings]
            )
            ax.add_patch(PathPatch(MplPath(verts, codes), **style))


def map_png(data: ReportData) -> str:
    """The study map: population, exclusions, service areas, sites, uncovered people; legend and scale bar."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.colors import LinearSegmentedColormap, LogNorm
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    fig, ax = plt.subplots(figsize=(9, 7))
    ax.set_facecolor(PALETTE["paper"])
    handles: list[Any] = []
    if data.study_area is not None:
        _draw_polygons(ax, [data.study_area], facecolor="#ffffff", edgecolor=PALETTE["ink"], linewidth=0.8, zorder=0)
    if data.demand_xy is not None and len(data.demand_xy):
        cmap = LinearSegmentedColormap.from_list("geocover_people", PALETTE["population"])
        w = np.asarray(data.demand_weight, dtype=float)
        positive = w > 0
        if positive.any():
            # a marker as wide as a demand cell at the map's scale (the axes are about 0.8 x 9 in = 520 pt wide)
            xy = data.demand_xy
            span = max(float(np.ptp(xy[:, 0])), float(np.ptp(xy[:, 1])) * 9 / 7, 1.0)
            marker = float(np.clip((data.demand_cell_m * 520.0 / span) ** 2, 0.3, 60.0))
            sc = ax.scatter(
                data.demand_xy[positive, 0], data.demand_xy[positive, 1], c=w[positive], s=marker, marker="s",
                cmap=cmap, norm=LogNorm(vmin=max(w[positive].min(), 0.1), vmax=w[positive].max()), linewidths=0, zorder=1,
            )
            cbar = fig.colorbar(sc, ax=ax, shrink=0.45, pad=0.02, anchor=(0.0, 1.0))
            cbar.set_label("people per demand unit")
    if data.exclusions:
        _draw_polygons(ax, data.exclusions, facecolor=PALETTE["exclusion"], alpha=0.35, edgecolor=PALETTE["exclusion"], hatch="///", linewidth=0.4, zorder=2)
        handles.append(Patch(facecolor=PALETTE["exclusion"], alpha=0.35, hatch="///", label="exclusion zones"))
    if data.service_areas:
        _draw_polygons(ax, data.service_areas, facecolor=PALETTE["service"], alpha=0.12, edgecolor=PALETTE["service"], linewidth=0.8, zorder=3)
        handles.append(Patch(facecolor=PALETTE["service"], alpha=0.3, edgecolor=PALETTE["service"], label="service areas"))
    for xy, key, label, size in (
        (data.unreachable_xy, "unreachable", "people no site can reach", 3),
        (data.left_out_xy, "left_out", "people the plan leaves out", 0.6),
    ):
        if xy is not None and len(xy):
            ax.scatter(xy[:, 0], xy[:, 1], s=size, color=PALETTE[key], linewidths=0, zorder=4)
            handles.append(Line2D([], [], marker="o", linestyle="", color=PALETTE[key], label=label))
    if data.existing_xy is not None and len(data.existing_xy):
        ax.scatter(data.existing_xy[:, 0], data.existing_xy[:, 1], s=150, marker="s", color=PALETTE["existing"], edgecolor=PALETTE["ink"], zorder=6)
        handles.append(Line2D([], [], marker="s", linestyle="", color=PALETTE["existing"], markeredgecolor=PALETTE["ink"], label="existing facilities"))
    if data.chosen_xy is not None and len(data.chosen_xy):
        ax.scatter(data.chosen_xy[:, 0], data.chosen_xy[:, 1], s=70, marker="^", color=PALETTE["chosen"], edgecolor="white", zorder=7)
        handles.append(Line2D([], [], marker="^", linestyle="", color=PALETTE["chosen"], label="sites in the plan"))
    ax.set_aspect("equal")
    ax.autoscale_view()
    x0, x1 = ax.get_xlim()
    y0, y1 = ax.get_ylim()
    length = _nice_length(x1 - x0)
    bx, by = x0 + 0.05 * (x1 - x0), y0 + 0.05 * (y1 - y0)
    ax.plot([bx, bx + length], [by, by], color=PALETTE["ink"], linewidth=3, zorder=8)
    ax.text(bx + length / 2, by + 0.015 * (y1 - y0), f"{length / 1000:g} km" if length >= 1000 else f"{length:g} m",
            ha="center", va="bottom", fontsize=9, color=PALETTE["ink"], zorder=8)
    ax.set_xticks([])
    ax.set_yticks([])
    ax.set_title(f"{data.title}\n{data.rule}; {data.crs}", fontsize=11, color=PALETTE["ink"])
    if handles:
        # beside the map, under the colour bar, so that it hides nothing
        ax.legend(handles=handles, loc="lower left", bbox_to_anchor=(1.02, 0.0), fontsize=8, framealpha=0.9)
    return _png(fig)


def tradeoff_png(points: list[dict[str, Any]]) -> str:
    """People covered against number of sites."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    curve = [row for row in points if "end point" not in str(row.get("status"))]
    ends = [row for row in points if "end point" in str(row.get("status"))]
    p = np.array([row["p"] for row in curve], dtype=float)
    share = np.array([row["share"] for row in curve], dtype=float) * 100
    fig, ax = plt.subplots(figsize=(7, 4))
    ax.set_facecolor(PALETTE["paper"])
    ax.plot(p, share, marker="o", color=PALETTE["service"], linewidth=2, label="most people served with p new sites")
    for row in curve:
        if row.get("status") not in (None, "optimal"):
            ax.annotate(f"gap {100 * row.get('gap', 0):.1f} %", (row["p"], row["share"] * 100),
                        textcoords="offset points", xytext=(0, 6), fontsize=7)
    for row in ends:
        ax.scatter([row["p"]], [row["share"] * 100], marker="*", s=160, color=PALETTE["chosen"], zorder=5,
                   label=f"everyone coverable served: {row['p']} sites")
    ax.legend(loc="lower right", fontsize=8)
    for level in (80, 90, 95, 99):
        ax.axhline(level, color="#b9b3a5", linewidth=0.6, linestyle="--")
    ax.set_xlabel("number of sites")
    ax.set_ylabel("share of coverable people served (%)")
    ax.set_ylim(0, 101)
    ax.grid(alpha=0.3)
    return _png(fig)


def _fmt(value: Any) -> str:
    if isinstance(value, float):
        if not math.isfinite(value):
            return "-"
        if abs(value) >= 100:
            return f"{value:,.0f}"
        return f"{value:.4g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(_fmt(v) for v in value)
    return str(value)


def _table(rows: list[dict[str, Any]]) -> str:
    if not rows:
        return "<p><em>none</em></p>"
    cols = list(rows[0])
    head = "".join(f"<th>{html.escape(c)}</th>" for c in cols)
    body = "".join(
        "<tr>" + "".join(f"<td>{html.escape(_fmt(r.get(c, '')))}</td>" for c in cols) + "</tr>" for r in rows
    )
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _kv(mapping: dict[str, Any]) -> str:
    return _table([{"item": k, "value": v} for k, v in mapping.items()])


_STYLE = f"""
body {{ font-family: system-ui, -apple-system, 'Segoe UI', sans-serif; color: {PALETTE['ink']};
       background: {PALETTE['paper']}; max-width: 1100px; margin: 2em auto; padding: 0 1em; line-height: 1.45; }}
h1 {{ font-size: 1.6em; margin-bottom: 0.2em; }}
h2 {{ font-size: 1.2em; border-bottom: 2px solid {PALETTE['service']}; padding-bottom: 0.2em; margin-top: 2em; }}
.caution {{ border-left: 6px solid {PALETTE['existing']}; background: #fff4e6; padding: 0.8em 1em; font-weight: 600; }}
table {{ border-collapse: collapse; margin: 0.5em 0; font-size: 0.9em; }}
th, td {{ border: 1px solid #d9d4c7; padding: 0.25em 0.6em; text-align: left; }}
th {{ background: #ece7da; }}
img {{ max-width: 100%; }}
.muted {{ color: #5d6470; font-size: 0.9em; }}
"""


def render_report(data: ReportData) -> str:
    """The report as one HTML string."""
    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        f"<title>{html.escape(data.title)}: geocover report</title><style>{_STYLE}</style></head><body>",
        f"<h1>{html.escape(data.title)}</h1>",
        f"<p class='muted'>{html.escape(data.model)}; {html.escape(data.rule)}; working CRS {html.escape(data.crs)}</p>",
        f"<p class='caution'>{html.escape(CAUTION)}</p>",
        "<h2>Summary</h2>",
        _kv(data.plan_summary),
        "<h2>Map</h2>",
        f"<img alt='study map' src='data:image/png;base64,{map_png(data)}'>",
    ]
    if data.tradeoff:
        parts += [
            "<h2>Trade-off: people covered against number of sites</h2>",
            f"<img alt='trade-off chart' src='data:image/png;base64,{tradeoff_png(data.tradeoff)}'>",
            _table(data.tradeoff),
            "<p class='muted'>Smallest number of new sites that reaches each level of the coverable people "
            "(proven: every smaller number has a bound below the level):</p>",
            _table([{"level": k, "new sites": v[0], "proven smallest": v[1]} for k, v in data.tradeoff_marks.items()]),
        ]
    parts += [
        "<h2>Sites in the plan</h2>",
        _table(data.sites_table),
        "<h2>Coverage today and with the plan</h2>",
        _table(data.today_vs_plan),
        "<h2>People not covered, by reason</h2>",
        _kv(data.uncovered_by_reason),
        "<p class='muted'>unreachable: no candidate or existing site can serve them within the limit; "
        "left_out: some site could, but the plan does not open it.</p>",
    ]
    if data.audit:
        parts += ["<h2>Full-resolution audit (aggregation error)</h2>", _kv(data.audit)]
    parts += [
        "<h2>Candidate screening</h2>",
        _kv(data.screening) if data.screening else "<p><em>no screening</em></p>",
        "<h2>Inputs</h2>",
        _table(data.inputs),
        "<h2>Parameters</h2>",
        _kv(data.parameters),
    ]
    if data.notes:
        parts += ["<h2>Notes</h2><ul>"] + [f"<li>{html.escape(n)}</li>" for n in data.notes] + ["</ul>"]
    parts += [f"<p class='caution'>{html.escape(CAUTION)}</p>", "</body></html>"]
    return "\n".join(parts)


def write_report(path: Path | str, data: ReportData) -> Path:
    """Write the report atomically."""
    from ..layers import atomic_output

    path = Path(path)
    text = render_report(data)
    with atomic_output(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    logger.info("wrote %s", path)
    return path
