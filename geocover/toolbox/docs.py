"""The tools reference (docs/tools.md), generated from the registry so it cannot drift.

Regenerate with ``python -m geocover.toolbox.docs > docs/tools.md``; a test
checks the committed file matches.
"""

from __future__ import annotations

from .registry import tools

__all__ = ["tools_markdown"]

_INTRO = """# Tools

Generated from the tool registry (`python -m geocover.toolbox.docs > docs/tools.md`); do not edit by hand.

Run a tool with `geocover run TOOL --name value ...`; `geocover describe TOOL` prints the same table.
Values with units are written as text (`"5 km"`, `"8 min"`, `"95 %"`); a layer is `file.gpkg` or
`file.gpkg:layer`. Every parameter is checked before any work starts and every problem is reported at
once; a usage problem exits with 2, a runtime problem with 1. The model tools (`cover-*`, `tradeoff`,
`audit`) write `<tool>.gpkg`, `report.html` and `manifest.json` into `--out`.

Results are planning aids: check them against local codes, the authority having jurisdiction and
licensed professional practice.
"""


def tools_markdown() -> str:
    parts = [_INTRO]
    for tool in tools().values():
        parts.append(f"\n## `{tool.id}`\n\n{tool.summary}.\n")
        if tool.description:
            parts.append(f"\n{tool.description}\n")
        parts.append("\n| parameter | type | default | meaning |\n| --- | --- | --- | --- |\n")
        for p in tool.params:
            kind = p.type_name + (f" [{p.unit}]" if p.unit else "")
            if getattr(p, "choices", None) is not None:
                kind += ": " + " / ".join(f"`{c.value}`" for c in p.choices)
            parts.append(f"| `{p.cli_name}` | {kind} | {p.describe_default()} | {p.help} |\n")
        parts.append("\nOutputs: " + ", ".join(f"`{o}`" for o in tool.outputs) + "\n")
    return "".join(parts)


if __name__ == "__main__":  # pragma: no cover
    print(tools_markdown(), end="")
