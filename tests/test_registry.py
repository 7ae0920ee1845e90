"""The registry: built-ins explicitly, plugins by entry point, a broken plugin never breaks the CLI."""

from __future__ import annotations

import importlib.metadata

import pytest
from click.testing import CliRunner

from geocover.toolbox import registry
from geocover.toolbox.params import Number
from geocover.toolbox.tool import Tool, ToolResult

PLUGIN = Tool(
    id="count-sheep",
    summary="a plugin tool used by the tests",
    params=(Number("sheep", "how many", 3, minimum=0, integer=True),),
    outputs=(),
    run_fn=lambda p, run: ToolResult("count-sheep", lines=[f"{p['sheep']} sheep"]),
)


class _EP:
    def __init__(self, name, obj=None, error=None):
        self.name, self.value, self._obj, self._error = name, f"tests:{name}", obj, error

    def load(self):
        if self._error:
            raise self._error
        return self._obj


@pytest.fixture
def plugins(monkeypatch):
    eps = [_EP("count-sheep", PLUGIN), _EP("broken", error=ImportError("no module named 'missing_dep'"))]
    real = importlib.metadata.entry_points

    def fake(**kwargs):
        if kwargs.get("group") == registry.ENTRY_POINT_GROUP:
            return eps
        return real(**kwargs)

    monkeypatch.setattr(importlib.metadata, "entry_points", fake)
    registry.tools.cache_clear()
    registry._BROKEN.clear()
    yield
    registry.tools.cache_clear()
    registry._BROKEN.clear()


def test_plugin_tools_run_and_broken_ones_are_listed(plugins):
    from geocover.cli import cli

    runner = CliRunner()
    listed = runner.invoke(cli, ["tools"], catch_exceptions=False)
    assert listed.exit_code == 0
    assert "count-sheep" in listed.output
    assert "broken" in listed.output and "could not be loaded" in listed.output
    ran = runner.invoke(cli, ["run", "count-sheep", "--sheep", "5"], catch_exceptions=False)
    assert ran.exit_code == 0 and "5 sheep" in ran.output
    bad = runner.invoke(cli, ["run", "count-sheep", "--sheep", "-2"], catch_exceptions=False)
    assert bad.exit_code == 2 and "sheep" in bad.output


def test_builtins_come_first_and_in_order():
    ids = list(registry.tools())
    assert ids[: len(registry.BUILTIN)] == [
        "demand-grid", "demand-areas", "screen-sites", "coverage", "cover-all", "cover-most",
        "cover-target", "cover-twice", "tradeoff", "audit", "study",
    ]


def test_python_call_runs_the_same_check():
    from geocover.toolbox.tool import CheckError

    with pytest.raises(CheckError) as info:
        registry.get_tool("cover-most")(distance="-5 km", sites="two")
    names = {p.param for p in info.value.problems}
    assert {"distance", "sites"} <= names
