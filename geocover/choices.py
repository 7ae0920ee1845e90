"""Named choices used by tools, study files and the Python API.

Kept in a light module (no GDAL, no solver) so that the command line can
list them without loading heavy libraries.  Library functions accept either
the enum member or its string value.
"""

from __future__ import annotations

import enum

__all__ = [
    "GridValues",
    "ClipMode",
    "BadValues",
    "Placement",
    "LatticeShape",
    "ServiceMetric",
    "ModelKind",
    "SolverName",
    "ExistingRole",
]


class GridValues(str, enum.Enum):
    """What a population band holds."""

    COUNT = "count"  #: people per cell
    DENSITY_KM2 = "density_km2"  #: people per square kilometre


class ClipMode(str, enum.Enum):
    """How cells on the edge of a study area are treated."""

    CENTRE = "centre"  #: a cell belongs when its centre is inside
    FRACTION = "fraction"  #: edge cells count by the share of their area inside


class BadValues(str, enum.Enum):
    """What to do with negative or non-finite population values."""

    ERROR = "error"
    ZERO = "zero"


class Placement(str, enum.Enum):
    """Where an area's population is placed."""

    CENTROID = "centroid"
    INSIDE = "inside"  #: a point guaranteed inside the polygon
    SPREAD = "spread"  #: split over a weight raster or a lattice inside the polygon


class LatticeShape(str, enum.Enum):
    SQUARE = "square"
    HEX = "hex"


class ServiceMetric(str, enum.Enum):
    PLANAR = "planar"  #: straight line in the projected working CRS
    GEODESIC = "geodesic"  #: on the ellipsoid
    NETWORK = "network"  #: travel time on roads


class ModelKind(str, enum.Enum):
    COVER_ALL = "cover-all"  #: LSCP
    COVER_MOST = "cover-most"  #: MCLP
    COVER_TARGET = "cover-target"  #: least cost to reach a coverage share
    COVER_TWICE = "cover-twice"  #: backup coverage


class SolverName(str, enum.Enum):
    CBC = "cbc"
    HIGHS = "highs"


class ExistingRole(str, enum.Enum):
    KEPT = "kept"
    OPTIONAL = "optional"
