"""The command line, generated from the tool registry.

    geocover tools                      list the tools
    geocover describe TOOL              a tool's parameters, types, defaults and units
    geocover run TOOL --name value ...  run one tool
    geocover study FILE.toml [--out D]  run a whole study

Usage errors (a bad or missing parameter, a bad study file) exit with 2 and
name the parameter; runtime errors exit with 1.  Nothing heavy (GDAL, the
solver) is imported until a tool runs.
"""

from __future__ import annotations

import logging
import sys
from contextlib import contextmanager
from typing import Any, Iterator

import click

from . import __version__
from .errors import GeocoverError, InputError, ParameterError, StudyFileError

__all__ = ["main", "cli", "parse_tool_args"]

logger = logging.getLogger("geocover")

CAUTION_LINE = (
    "Caution: results are planning aids. Check them against local codes, the authority having "
    "jurisdiction and licensed professional practice before siting any facility."
)


class UsageProblem(click.UsageError):
    """A click usage error (exit 2) carrying our message."""


def _progress_factory(enabled: bool) -> Any:
    """Progress bars on a terminal only; silent when stderr is not a terminal."""

    @contextmanager
    def factory(name: str, total: int | None) -> Iterator[Any]:
        if not enabled:
            class _Quiet:
                def update(self, n: int = 1) -> None:
                    pass

            yield _Quiet()
            return
        from tqdm import tqdm

        # no monitor thread: it would be running when road searches fork their worker processes
        # (Python 3.12+ warns of fork in a multi-threaded process), and these bars do not need it
        tqdm.monitor_interval = 0
        fmt = "{desc}: {elapsed}" if total is None else None
        bar = tqdm(total=total, desc=name, file=sys.stderr, leave=False, bar_format=fmt, dynamic_ncols=True)
        try:
            yield bar
        finally:
            bar.close()
            click.echo(f"  {name}: done", err=True)

    return factory


def _version_text() -> str:
    from .versions import show_versions

    info = show_versions(native=True)
    keys = ("python", "gdal", "proj", "geos", "cbc", "numpy", "scipy", "shapely", "pyproj", "rasterio", "geopandas", "mip")
    return f"geocover {__version__}\n" + "\n".join(f"  {k}: {info.get(k)}" for k in keys)


def _print_version(ctx: click.Context, _param: Any, value: bool) -> None:
    if not value or ctx.resilient_parsing:
        return
    click.echo(_version_text())
    ctx.exit(0)


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--version", is_flag=True, expose_value=False, is_eager=True, callback=_print_version,
              help="Show geocover's version and those of GDAL, PROJ, GEOS and the solver.")
@click.option("-v", "--verbose", count=True, help="More log output (-vv for debug).")
@click.option("-q", "--quiet", count=True, help="Less output: warnings only.")
@click.pass_context
def cli(ctx: click.Context, verbose: int, quiet: int) -> None:
    """geocover: where to put a few facilities so that people live within reach.

    Coverage-based facility siting (LSCP, MCLP, backup coverage) from
    population grids or areas, candidate sites and constraint layers to
    map-ready GeoPackage layers, a report and a manifest.
    """
    level = logging.WARNING + 10 * quiet - 10 * verbose
    logging.basicConfig(level=max(logging.DEBUG, min(level, logging.ERROR)), format="%(levelname)s %(name)s: %(message)s")
    ctx.obj = {"verbose": verbose, "quiet": quiet}


@cli.command("tools")
def tools_cmd() -> None:
    """List the tools."""
    from .toolbox.registry import broken_plugins, tools

    available = tools()
    width = max(len(t) for t in available)
    for tool in available.values():
        click.echo(f"{tool.id:<{width}}  {tool.summary}")
    for name, why in broken_plugins().items():
        click.echo(f"{name:<{width}}  (plugin could not be loaded: {why})")


@cli.command("describe")
@click.argument("tool_id", metavar="TOOL")
def describe_cmd(tool_id: str) -> None:
    """Show a tool's parameters: type, default, unit and help."""
    from .toolbox.registry import get_tool

    tool = _usage(get_tool, tool_id)
    click.echo(f"{tool.id}: {tool.summary}")
    if tool.description:
        click.echo(tool.description)
    click.echo("\nparameters:")
    for p in tool.params:
        unit = f" [{p.unit}]" if p.unit else ""
        choices = ""
        if getattr(p, "choices", None) is not None:
            choices = " {" + "|".join(str(c.value) for c in p.choices) + "}"
        click.echo(f"  {p.cli_name:<22} {p.type_name}{unit}{choices}; default: {p.describe_default()}")
        if p.help:
            click.echo(f"  {'':<22} {p.help}")
    click.echo("\noutputs: " + ", ".join(tool.outputs))


def parse_tool_args(tool: Any, args: list[str]) -> dict[str, Any]:
    """``--name value`` pairs into a raw parameter dict; flags take no value; repeated names make lists."""
    from .toolbox.params import ExclusionList, Flag, suggest

    by_cli = {p.cli_name: p for p in tool.params}
    raw: dict[str, Any] = {}
    i = 0
    while i < len(args):
        arg = args[i]
        if not arg.startswith("--"):
            raise ParameterError(f"{tool.id}: unexpected argument {arg!r}; parameters are written --name value", None)
        name, eq, inline = arg.partition("=")
        param = by_cli.get(name)
        if param is None:
            raise ParameterError(
                f"{tool.id}: unknown parameter {name}{suggest(name, list(by_cli))}; `geocover describe {tool.id}` lists them",
                name.lstrip("-"),
            )
        if isinstance(param, Flag) and not eq:
            raw[param.name] = True
            i += 1
            continue
        if eq:
            value = inline
            i += 1
        else:
            if i + 1 >= len(args):
                raise ParameterError(f"{tool.id}: parameter {name} needs a value", param.name)
            value = args[i + 1]
            i += 2
        if isinstance(param, ExclusionList):
            raw.setdefault(param.name, []).append(value)
        elif param.name in raw:
            raise ParameterError(f"{tool.id}: parameter {name} given twice", param.name)
        else:
            raw[param.name] = value
    return raw


def _usage(fn: Any, *args: Any) -> Any:
    try:
        return fn(*args)
    except (ParameterError, StudyFileError) as exc:
        raise UsageProblem(str(exc)) from None


def _execute(ctx: click.Context, tool: Any, raw: dict[str, Any]) -> None:
    from .toolbox.params import Context
    from .toolbox.tool import RunContext

    quiet = ctx.obj.get("quiet", 0) if ctx.obj else 0
    params_ctx = Context()
    # check first: every parameter problem at once, exit 2
    params = _usage(tool.check, raw, params_ctx)
    run = RunContext(params=params_ctx, progress=_progress_factory(sys.stderr.isatty() and not quiet))
    try:
        result = tool.run_fn(params, run)
    except StudyFileError as exc:
        raise UsageProblem(str(exc)) from None
    except KeyboardInterrupt:
        click.echo("interrupted: no partial output was left behind", err=True)
        ctx.exit(130)
    except GeocoverError as exc:
        click.echo(f"error: {exc}", err=True)
        ctx.exit(1)
    except Exception as exc:  # an unexpected failure: a message, not a traceback, unless -v
        if ctx.obj and ctx.obj.get("verbose"):
            raise
        kind = "input problem" if isinstance(exc, InputError) else "unexpected error"
        click.echo(f"error ({kind}): {type(exc).__name__}: {exc}\n(run with -v for the traceback)", err=True)
        ctx.exit(1)
    for line in result.lines:
        click.echo(line)
    if not quiet:
        click.echo(CAUTION_LINE)


@cli.command("run", context_settings={"ignore_unknown_options": True, "allow_extra_args": True, "help_option_names": []})
@click.argument("tool_id", metavar="TOOL")
@click.argument("args", nargs=-1, type=click.UNPROCESSED)
@click.pass_context
def run_cmd(ctx: click.Context, tool_id: str, args: tuple[str, ...]) -> None:
    """Run one tool: geocover run TOOL --name value ... (see `geocover describe TOOL`)."""
    from .toolbox.registry import get_tool

    tool = _usage(get_tool, tool_id)
    if "--help" in args or "-h" in args:
        ctx.invoke(describe_cmd, tool_id=tool_id)
        return
    raw = _usage(parse_tool_args, tool, list(args))
    _execute(ctx, tool, raw)


@cli.command("study")
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--out", type=click.Path(file_okay=False), default=None, help="Output folder (default: the study file's `out`).")
@click.pass_context
def study_cmd(ctx: click.Context, file: str, out: str | None) -> None:
    """Run a whole study from a TOML file."""
    from .toolbox.registry import get_tool

    raw: dict[str, Any] = {"file": file}
    if out is not None:
        raw["out"] = out
    tool = get_tool("study")
    # check the study file itself before any work, reporting every problem at once
    from pathlib import Path

    from .toolbox.study import load_study

    _usage(load_study, Path(file), out)
    _execute(ctx, tool, raw)


def main(argv: list[str] | None = None) -> int:
    """Console-script entry point."""
    try:
        cli.main(args=argv, prog_name="geocover", standalone_mode=True)
    except SystemExit as exc:
        return int(exc.code or 0)
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
