"""Choosing and checking the working CRS.

The working CRS is projected and in metres.  When the user names none, the
first projected input CRS is used; when every input is geographic, a local
projected CRS is chosen (UTM for the zone of the data's centre, or a
Lambert azimuthal equal-area CRS centred on the data near the poles) and the
choice is logged.
"""

from __future__ import annotations

import logging
from typing import Any

from pyproj import CRS

from .errors import CRSError

__all__ = ["as_crs", "require_projected", "local_projected_crs", "choose_working_crs", "crs_label"]

logger = logging.getLogger(__name__)


def as_crs(value: Any, what: str = "crs") -> CRS:
    """A :class:`pyproj.CRS` from ``"EPSG:32626"``, ``32626``, WKT or a CRS."""
    if isinstance(value, CRS):
        return value
    try:
        return CRS.from_user_input(value)
    except Exception as exc:  # pyproj raises CRSError of its own, with a long message
        raise CRSError(
            f"{what}: cannot read {value!r} as a coordinate reference system; give an EPSG code such as "
            f"'EPSG:32633' or a WKT string ({exc})"
        ) from None


def crs_label(crs: Any) -> str:
    """A short label: ``EPSG:32626`` when the CRS has an authority code, else its name."""
    crs = as_crs(crs)
    auth = crs.to_authority()
    return f"{auth[0]}:{auth[1]}" if auth else crs.name


def require_projected(crs: Any, what: str = "working CRS") -> CRS:
    """Refuse a geographic CRS or one whose unit is not the metre."""
    crs = as_crs(crs, what)
    if crs.is_geographic:
        raise CRSError(
            f"{what} {crs_label(crs)} is geographic (degrees); distances need a projected CRS in metres. "
            "Name one (e.g. the UTM zone of the study area) or use geodesic coverage"
        )
    units = {axis.unit_name for axis in crs.axis_info}
    if units and not units <= {"metre", "meter", "m"}:
        raise CRSError(
            f"{what} {crs_label(crs)} has axis units {sorted(units)}; geocover works in metres. "
            "Choose a projected CRS in metres"
        )
    return crs


def local_projected_crs(lon: float, lat: float) -> CRS:
    """A projected metre CRS suited to data centred on ``lon``, ``lat``.

    UTM (WGS 84) between 80 S and 84 N, polar Lambert azimuthal equal-area
    beyond.

    >>> crs_label(local_projected_crs(-27.0, 45.0))
    'EPSG:32626'
    """
    if -80.0 <= lat <= 84.0:
        zone = int((lon + 180.0) // 6.0) % 60 + 1
        return CRS.from_epsg((32600 if lat >= 0 else 32700) + zone)
    return CRS.from_proj4(f"+proj=laea +lat_0={90 if lat > 0 else -90} +lon_0={lon:.6f} +datum=WGS84 +units=m")


def choose_working_crs(requested: Any, input_crs: list[Any], lonlat_centre: tuple[float, float] | None) -> CRS:
    """The working CRS for a study.

    Parameters
    ----------
    requested : CRS-like or None
        What the user asked for; must be projected in metres.
    input_crs : list of CRS-like
        The CRSs of the input layers, in the order they were named.
    lonlat_centre : (lon, lat) or None
        Centre of the data, used when a local CRS must be chosen.
    """
    if requested is not None:
        return require_projected(requested, "working CRS (crs)")
    for value in input_crs:
        if value is None:
            continue
        crs = as_crs(value)
        if not crs.is_geographic:
            return require_projected(crs, f"input CRS {crs_label(crs)}")
    if lonlat_centre is None:
        raise CRSError("no input layer has a CRS; assign one to the layers or name the working CRS (crs = 'EPSG:...')")
    crs = local_projected_crs(*lonlat_centre)
    logger.info("inputs are geographic; working in the local projected CRS %s", crs_label(crs))
    return crs
