"""Helpers shared by the built-in tools."""

from __future__ import annotations

from typing import Any, Mapping

from .. import options
from ..params import Param

__all__ = ["GROUPS", "split_sections", "params_of"]

GROUPS: dict[str, tuple[Param, ...]] = {
    "study": options.CRS,
    "demand": options.DEMAND,
    "sites": options.SITES,
    "service": options.SERVICE,
    "model": options.MODEL,
    "output": options.OUTPUT,
}


def split_sections(params: Mapping[str, Any], groups: tuple[str, ...]) -> dict[str, dict[str, Any]]:
    """Sort a tool's flat converted parameters into the pipeline's groups."""
    out: dict[str, dict[str, Any]] = {}
    for group in groups:
        out[group] = {p.name: params.get(p.name, p.default) for p in GROUPS[group]}
    return out


def params_of(*groups: str, drop: tuple[str, ...] = ()) -> tuple[Param, ...]:
    """The parameters of several groups, without those named in ``drop``."""
    return tuple(p for g in groups for p in GROUPS[g] if p.name not in drop)
