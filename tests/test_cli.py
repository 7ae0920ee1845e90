"""The command line: listing, describing, exit codes, and light imports."""

from __future__ import annotations

import subprocess
import sys

import pytest
from click.testing import CliRunner

from geocover.cli import cli, parse_tool_args
from geocover.toolbox.registry import get_tool, tools

RUNNER = CliRunner()


def invoke(*args: str):
    return RUNNER.invoke(cli, list(args), catch_exceptions=False)


def test_tools_lists_every_builtin():
    result = invoke("tools")
    assert result.exit_code == 0
    for tool_id in ("demand-grid", "demand-areas", "screen-sites", "coverage", "cover-all", "cover-most",
                    "cover-twice", "tradeoff", "audit", "study"):
        assert tool_id in result.output


@pytest.mark.parametrize("tool_id", list(tools()))
def test_describe_works_for_every_tool(tool_id):
    result = invoke("describe", tool_id)
    assert result.exit_code == 0, result.output
    tool = get_tool(tool_id)
    for p in tool.params:
        assert p.cli_name in result.output


def test_unknown_tool_exits_2_with_a_suggestion():
    result = invoke("describe", "cover-mots")
    assert result.exit_code == 2
    assert "cover-most" in result.output


def test_bad_parameter_value_exits_2_and_names_the_parameter(tiny):
    result = invoke("run", "cover-most", "--grid", str(tiny["grid"]), "--candidates", f"{tiny['gpkg']}:candidates",
                    "--distance", "five km", "--sites", "2", "--out", str(tiny["dir"] / "o"))
    assert result.exit_code == 2
    assert "distance" in result.output


def test_unknown_parameter_exits_2_with_a_suggestion(tiny):
    result = invoke("run", "cover-most", "--grid", str(tiny["grid"]), "--distanse", "5 km")
    assert result.exit_code == 2
    assert "--distanse" in result.output and "did you mean '--distance'" in result.output


def test_every_problem_is_reported_at_once(tiny):
    result = invoke("run", "cover-most", "--grid", str(tiny["dir"] / "nope.tif"), "--distance", "-1 km",
                    "--sites", "x", "--out", str(tiny["dir"] / "o"))
    assert result.exit_code == 2
    for name in ("grid", "distance", "sites"):
        assert f"'{name}'" in result.output


def test_cross_parameter_rule_is_a_usage_error(tiny):
    # cover-most needs a number of sites or a budget
    result = invoke("run", "cover-most", "--grid", str(tiny["grid"]), "--candidates", f"{tiny['gpkg']}:candidates",
                    "--distance", "1 km", "--out", str(tiny["dir"] / "o"))
    assert result.exit_code == 2
    assert "'sites'" in result.output or "sites" in result.output


def test_parse_tool_args_flags_and_repeats():
    tool = get_tool("cover-all")
    raw = parse_tool_args(tool, ["--fewest", "--exclude", "a.gpkg", "--exclude=b.gpkg", "--distance", "2 km"])
    assert raw == {"fewest": True, "exclude": ["a.gpkg", "b.gpkg"], "distance": "2 km"}


def test_version_names_the_native_libraries():
    result = invoke("--version")
    assert result.exit_code == 0
    for name in ("gdal", "proj", "geos", "cbc"):
        assert name in result.output


def test_study_with_unknown_key_names_the_key(tmp_path):
    study = tmp_path / "s.toml"
    study.write_text('[demand]\ngird = "pop.tif"\n[sites]\n[service]\ndistance = "5 km"\n')
    result = invoke("study", str(study))
    assert result.exit_code == 2
    assert "gird" in result.output and "[demand]" in result.output and "did you mean 'grid'" in result.output


def test_missing_study_file_exits_2(tmp_path):
    result = invoke("study", str(tmp_path / "missing.toml"))
    assert result.exit_code == 2
    assert "does not exist" in result.output


def test_help_does_not_import_the_solver_or_gdal():
    # like click's own import tests: run in a fresh interpreter and inspect sys.modules
    code = (
        "import sys\n"
        "from geocover.cli import main\n"
        "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
        "main(['tools']); main(['describe', 'cover-most'])\n"
        "heavy = sorted(m for m in sys.modules if m.split('.')[0] in ('mip', 'rasterio', 'osgeo', 'pyogrio', 'fiona', 'geopandas'))\n"
        "print('HEAVY', heavy)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert "HEAVY []" in out, out
