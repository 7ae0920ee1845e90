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

    CENTRE = "centre"  #: a cell counts wholly when its centre lies inside
    FRACTION = "fraction"  #: a cell counts by the share of its area inside


class BadValues(str, enum.Enum):
    """What to do with negative or non-finite population values."""

    ERROR = "error"  #: stop with an error naming the band, the number of bad cells and the first one
    ZERO = "zero"  #: count them as zero people and say so in the summary


class Placement(str, enum.Enum):
    """Where an area's population is placed."""

    CENTROID = "centroid"  #: the polygon's centroid (may fall outside a concave polygon)
    INSIDE = "inside"  #: a point guaranteed inside the polygon (shapely.point_on_surface)
    SPREAD = "spread"  #: many points inside, by a weight raster or a regular lattice


class LatticeShape(str, enum.Enum):
    """Arrangement of generated candidate points."""

    SQUARE = "square"  #: rows and columns ``spacing`` apart
    HEX = "hex"  #: rows ``spacing * sqrt(3) / 2`` apart, every other row shifted by half a spacing


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
