"""Study files: a whole study in one TOML file.

A study file is data, never code (TOML only).  Its sections take exactly
the parameters of the matching tool groups::

    title = "Where should the new stations go?"
    crs = "EPSG:32626"          # optional
    out = "out"                 # output folder, relative to this file

    [demand]                    # grid = ..., or areas = ... with population = ...
    [sites]                     # candidates, existing, exclude = [{...}], land_use ...
    [service]                   # metric, distance or time
    [model]                     # kind, sites / budget / share, solver settings

Relative paths resolve against the file's folder.  Unknown keys are an
error that names the key and its section, with a close match suggested;
every problem in the file is reported at once.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

from ..choices import ModelKind
from ..errors import ParameterError, StudyFileError
from . import options
from .params import Context, OutputFolder, Param, Text, suggest
from .checks import check_demand, check_distance_units, check_model, check_service, check_sites
from .tool import RunContext

__all__ = ["SECTIONS", "TOP_LEVEL", "Study", "load_study", "run_study"]

SECTIONS: dict[str, tuple[Param, ...]] = {
    "demand": options.DEMAND,
    "sites": options.SITES,
    "service": options.SERVICE,
    "model": options.MODEL,
}

TOP_LEVEL: tuple[Param, ...] = (
    Text("title", "a title for the report", "geocover study"),
    *options.CRS,
    OutputFolder("out", "output folder, relative to the study file", "out"),
)


@dataclass(frozen=True)
class Study:
    """A checked study: converted parameter groups and where outputs go."""

    path: Path
    title: str
    kind: ModelKind
    sections: dict[str, dict[str, Any]]
    out: Path


def _convert_group(
    where: str, params: tuple[Param, ...], raw: Mapping[str, Any], ctx: Context, problems: list[str]
) -> dict[str, Any]:
    names = [p.name for p in params]
    for key in raw:
        if key not in names:
            problems.append(f"[{where}]: unknown key '{key}'{suggest(key, names)}; keys of [{where}]: {', '.join(names)}")
    out: dict[str, Any] = {}
    for p in params:
        value = raw.get(p.name, None if p.required else p.default)
        try:
            out[p.name] = p.convert(value, ctx) if value is not None else None
        except ParameterError as exc:
            problems.append(f"[{where}] {exc}")
        except ValueError as exc:
            problems.append(f"[{where}] parameter '{p.name}': {exc}")
    return out


def load_study(path: Path | str, out: Path | str | None = None) -> Study:
    """Read, convert and check a study file; raise one :class:`StudyFileError` listing every problem."""
    path = Path(path)
    if not path.is_file():
        raise StudyFileError(f"study file {path} does not exist; give the path to a .toml study file")
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise StudyFileError(f"study file {path} is not valid TOML: {exc}") from None
    except UnicodeDecodeError:
        raise StudyFileError(f"study file {path} is not a UTF-8 text file") from None
    base = path.resolve().parent
    ctx = Context(base_dir=base)
    problems: list[str] = []
    top_names = [p.name for p in TOP_LEVEL] + list(SECTIONS)
    top_raw = {}
    for key, value in raw.items():
        if key in SECTIONS:
            if not isinstance(value, dict):
                problems.append(f"'{key}' must be a section ([{key}]), not a {type(value).__name__}")
            continue
        if key not in top_names:
            problems.append(f"top level: unknown key '{key}'{suggest(key, top_names)}; keys: {', '.join(top_names)}")
            continue
        top_raw[key] = value
    if out is not None:
        top_raw["out"] = str(out)
    top = _convert_group("top level", TOP_LEVEL, top_raw, ctx, problems)
    sections: dict[str, dict[str, Any]] = {"study": {"crs": top.get("crs")}}
    for name, params in SECTIONS.items():
        section = raw.get(name, {})
        sections[name] = _convert_group(name, params, section if isinstance(section, dict) else {}, ctx, problems)
    for name in ("demand", "sites", "service"):
        if name not in raw:
            problems.append(f"the study file has no [{name}] section")
    if not problems:
        kind = sections["model"]["kind"]
        for check, group in (
            (check_demand, "demand"),
            (check_sites, "sites"),
            (check_service, "service"),
        ):
            problems.extend(f"[{group}] {p}" for p in check(sections[group]))
        problems.extend(f"[model] {p}" for p in check_model(sections["model"], kind))
        problems.extend(f"[service] {p}" for p in check_distance_units(sections["demand"], sections["service"]))
    if problems:
        lines = [f"study file {path}: {len(problems)} problem(s):"] + [f"  - {p}" for p in problems]
        raise StudyFileError("\n".join(lines))
    out_dir = top["out"] if top.get("out") is not None else base / "out"
    return Study(path=path, title=top["title"], kind=sections["model"]["kind"], sections=sections, out=Path(out_dir))


def run_study(path: Path | str, out: Path | str | None = None, run: RunContext | None = None) -> Any:
    """Run a study file end to end; returns ``(outcome, outputs)``.

    Results are planning aids: check them against local codes, the
    authority having jurisdiction and licensed professional practice.
    """
    from .pipeline import run_pipeline
    from .results import write_outputs

    study = load_study(path, out)
    run = run or RunContext(params=Context(base_dir=study.path.resolve().parent, out_dir=study.out))
    outcome = run_pipeline(study.sections, study.kind, run, title=study.title)
    outputs = write_outputs(outcome, study.out, run, name=study.path.stem)
    return outcome, outputs
