"""The docs stay in step with the code."""

from __future__ import annotations

from pathlib import Path

from geocover.toolbox.docs import tools_markdown

REPO = Path(__file__).resolve().parents[1]


def test_tools_reference_is_current():
    committed = (REPO / "docs" / "tools.md").read_text(encoding="utf-8")
    assert committed == tools_markdown(), "docs/tools.md is stale: python -m geocover.toolbox.docs > docs/tools.md"


def test_readme_opens_with_the_job_and_two_command_quick_start():
    text = (REPO / "README.md").read_text(encoding="utf-8")
    head = text.split("## Quick start", 1)
    assert len(head) == 2
    quick = head[1].split("\n## ", 1)[0]
    commands = [block.strip() for block in quick.split("```sh")[1:]]
    commands = [c.split("```")[0].strip() for c in commands]
    assert len(commands) == 2
    assert commands[0].endswith("geocover study sample_layers/tarrow_study.toml")
    assert "pytest" in commands[1]
    assert "authority having jurisdiction" in text


def test_ci_runs_the_readme_test_command():
    text = (REPO / "README.md").read_text(encoding="utf-8")
    quick = text.split("## Quick start", 1)[1]
    test_cmd = quick.split("```sh")[2].split("```")[0].strip()
    ci = (REPO / ".ci" / "run").read_text(encoding="utf-8")
    assert test_cmd in ci.splitlines()


def test_readme_python_example_runs(monkeypatch):
    """The README's Python example is executed, from the repository folder, as a user would."""
    text = (REPO / "README.md").read_text(encoding="utf-8")
    code = text.split("```python", 1)[1].split("```", 1)[0]
    monkeypatch.chdir(REPO)
    namespace: dict = {}
    exec(compile(code, "README.md", "exec"), namespace)
    plan = namespace["plan"]
    assert plan.status.value == "optimal"
    assert int((namespace["reach"].role[plan.sites] == 0).sum()) == 6
