"""What a tool is: an id, a summary, typed parameters, outputs and a run function.

``check(raw)`` converts every parameter and reports every problem at once,
before any work starts; ``run(raw)`` checks and then runs.  The command
line, the Python API and study files all end in the same ``run``.
"""

from __future__ import annotations

import contextlib
import logging
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator, Mapping, Protocol

from ..errors import ParameterError
from .params import Context, Param, suggest

__all__ = ["Tool", "ToolResult", "CheckError", "RunContext", "Progress"]

logger = logging.getLogger(__name__)


class CheckError(ParameterError):
    """Several parameter problems, reported together."""

    def __init__(self, problems: list[ParameterError], tool: str) -> None:
        self.problems = problems
        lines = [f"{tool}: {len(problems)} problem(s) with the parameters:"] + [f"  - {p}" for p in problems]
        super().__init__("\n".join(lines), problems[0].param if problems else None)


class Progress(Protocol):
    def update(self, n: int = 1) -> None: ...


class _NoProgress:
    def update(self, n: int = 1) -> None:
        pass


@dataclass
class RunContext:
    """Per-run state: timings per step and how to show progress.

    The library never draws progress bars; the command line passes a
    ``progress`` factory that does (and stays quiet off a terminal).
    """

    params: Context = field(default_factory=Context)
    progress: Callable[[str, int | None], Any] | None = None
    timings: dict[str, float] = field(default_factory=dict)

    @contextlib.contextmanager
    def step(self, name: str, total: int | None = None) -> Iterator[Progress]:
        """Time a step, log it, and give it a progress handle."""
        start = time.perf_counter()
        logger.info("%s ...", name)
        manager = self.progress(name, total) if self.progress is not None else contextlib.nullcontext(_NoProgress())
        with manager as bar:
            yield bar
        seconds = time.perf_counter() - start
        self.timings[name] = round(self.timings.get(name, 0.0) + seconds, 4)
        logger.info("%s done in %.2f s", name, seconds)


@dataclass
class ToolResult:
    """What a tool hands back: files written, a summary, and lines to print."""

    tool: str
    outputs: dict[str, Path] = field(default_factory=dict)
    summary: dict[str, Any] = field(default_factory=dict)
    lines: list[str] = field(default_factory=list)
    value: Any = None


@dataclass(frozen=True)
class Tool:
    """A processing tool.

    ``run_fn(params, run_context)`` receives the converted parameters (every
    declared parameter present, defaults filled in).  ``validate`` checks
    rules that span several parameters and returns every problem it finds.
    """

    id: str
    summary: str
    params: tuple[Param, ...]
    outputs: tuple[str, ...]
    run_fn: Callable[[dict[str, Any], RunContext], ToolResult]
    description: str = ""
    validate: Callable[[dict[str, Any]], list[ParameterError]] | None = None

    def param(self, name: str) -> Param:
        for p in self.params:
            if p.name == name:
                return p
        raise KeyError(name)

    @property
    def param_names(self) -> list[str]:
        return [p.name for p in self.params]

    def check(self, raw: Mapping[str, Any], ctx: Context | None = None) -> dict[str, Any]:
        """Convert every parameter; raise one :class:`CheckError` listing every problem."""
        ctx = ctx or Context()
        problems: list[ParameterError] = []
        names = self.param_names
        for key in raw:
            if key not in names:
                problems.append(
                    ParameterError(
                        f"unknown parameter '{key}' for tool {self.id}{suggest(key, names)}; "
                        f"`geocover describe {self.id}` lists them",
                        key,
                    )
                )
        converted: dict[str, Any] = {}
        for p in self.params:
            value = raw[p.name] if p.name in raw else (None if p.required else p.default)
            if value is None and p.required:
                problems.append(ParameterError(f"parameter '{p.name}' is required: {p.help}", p.name))
                continue
            try:
                converted[p.name] = p.convert(value, ctx) if value is not None else None
            except ParameterError as exc:
                problems.append(exc if exc.param else ParameterError(str(exc), p.name))
            except ValueError as exc:  # an InputError from a shared parser
                problems.append(ParameterError(f"parameter '{p.name}': {exc}", p.name))
        if not problems and self.validate is not None:
            problems.extend(self.validate(converted))
        if problems:
            raise CheckError(problems, self.id)
        return converted

    def run(self, raw: Mapping[str, Any], ctx: RunContext | None = None) -> ToolResult:
        """Check all parameters, then run."""
        ctx = ctx or RunContext()
        params = self.check(raw, ctx.params)
        return self.run_fn(params, ctx)

    def __call__(self, **kwargs: Any) -> ToolResult:
        """Run from Python with keyword arguments: ``tool(demand="pop.tif", out="o.gpkg")``."""
        return self.run(kwargs)
