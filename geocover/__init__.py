"""geocover: coverage-based facility siting from population layers to map-ready decisions.

The public API is small and explicit.  Heavy modules (GDAL through rasterio,
the solver through python-mip) load on first use, so that importing
geocover, or asking the command line for help, stays fast.

Results are planning aids: check them against local codes, the authority
having jurisdiction and licensed professional practice.
"""

from __future__ import annotations

import importlib
import logging
from typing import Any

from .errors import (
    CRSError,
    GeocoverError,
    InputError,
    LayerError,
    OutputError,
    ParameterError,
    SolverError,
    StudyFileError,
)
from .values import Demand, Metric, Plan, Reach, ScreeningRecord, ServiceRule, SiteRole, Sites, SolveStatus, Verdict

__version__ = "0.1.0"

logging.getLogger(__name__).addHandler(logging.NullHandler())

# name -> module that defines it, imported on first access (PEP 562)
_LAZY = {
    "demand_from_grid": "geocover.demand",
    "demand_from_areas": "geocover.demand",
    "demand_from_points": "geocover.demand",
    "screen_sites": "geocover.sites",
    "Exclusion": "geocover.sites",
    "LandUseMask": "geocover.sites",
    "lattice_candidates": "geocover.sites",
    "reach_planar": "geocover.coverage",
    "reach_geodesic": "geocover.coverage",
    "reach_network": "geocover.network",
    "cover_all": "geocover.models",
    "cover_most": "geocover.models",
    "cover_target": "geocover.models",
    "cover_twice": "geocover.models",
    "tradeoff": "geocover.models",
    "audit": "geocover.evaluate",
    "run_study": "geocover.toolbox.study",
    "show_versions": "geocover.versions",
}

__all__ = [
    "__version__",
    "Demand",
    "Sites",
    "SiteRole",
    "ScreeningRecord",
    "Verdict",
    "Metric",
    "ServiceRule",
    "Reach",
    "Plan",
    "SolveStatus",
    "GeocoverError",
    "InputError",
    "LayerError",
    "CRSError",
    "ParameterError",
    "StudyFileError",
    "SolverError",
    "OutputError",
    *_LAZY,
]


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'geocover' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(__all__)
