"""The tool registry: built-in tools registered explicitly, others found by entry point.

Third-party packages add tools through the ``geocover.tools`` entry-point
group; each entry point names a :class:`~geocover.toolbox.tool.Tool` (or a
callable returning one).  A plugin that fails to load is logged and listed
as broken; it never breaks the command line.
"""

from __future__ import annotations

import importlib
import importlib.metadata
import logging
from functools import lru_cache

from .tool import Tool

__all__ = ["ENTRY_POINT_GROUP", "BUILTIN", "tools", "get_tool", "broken_plugins"]

logger = logging.getLogger(__name__)

ENTRY_POINT_GROUP = "geocover.tools"

# (module, attribute) of every built-in tool, in the order `geocover tools` lists them
BUILTIN: tuple[tuple[str, str], ...] = (
    ("geocover.toolbox.tools.demand_grid", "TOOL"),
    ("geocover.toolbox.tools.demand_areas", "TOOL"),
    ("geocover.toolbox.tools.screen_sites", "TOOL"),
    ("geocover.toolbox.tools.coverage", "TOOL"),
    ("geocover.toolbox.tools.models", "COVER_ALL"),
    ("geocover.toolbox.tools.models", "COVER_MOST"),
    ("geocover.toolbox.tools.models", "COVER_TARGET"),
    ("geocover.toolbox.tools.models", "COVER_TWICE"),
    ("geocover.toolbox.tools.models", "TRADEOFF"),
    ("geocover.toolbox.tools.audit", "TOOL"),
    ("geocover.toolbox.tools.study", "TOOL"),
)

_BROKEN: dict[str, str] = {}


@lru_cache(maxsize=1)
def tools() -> dict[str, Tool]:
    """Every available tool by id: built-ins first, then plugins."""
    found: dict[str, Tool] = {}
    for module, attr in BUILTIN:
        tool = getattr(importlib.import_module(module), attr)
        found[tool.id] = tool
    for ep in importlib.metadata.entry_points(group=ENTRY_POINT_GROUP):
        try:
            obj = ep.load()
            tool = obj() if callable(obj) and not isinstance(obj, Tool) else obj
            if not isinstance(tool, Tool):
                raise TypeError(f"entry point gives {type(tool).__name__}, not a Tool")
            if tool.id in found:
                raise ValueError(f"tool id {tool.id!r} is already taken")
            found[tool.id] = tool
        except Exception as exc:  # a broken plugin must not break the CLI
            _BROKEN[ep.name] = f"{type(exc).__name__}: {exc}"
            logger.warning("plugin tool %r (%s) could not be loaded: %s", ep.name, ep.value, exc)
    return found


def broken_plugins() -> dict[str, str]:
    """Plugins that failed to load, with the reason."""
    tools()
    return dict(_BROKEN)


def get_tool(tool_id: str) -> Tool:
    """A tool by id; an unknown id lists the known ones (with a close match)."""
    from ..errors import ParameterError
    from .params import suggest

    available = tools()
    if tool_id not in available:
        raise ParameterError(
            f"unknown tool {tool_id!r}{suggest(tool_id, list(available))}; `geocover tools` lists them: "
            + ", ".join(available),
            "tool",
        )
    return available[tool_id]
