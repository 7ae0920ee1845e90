"""Service-area polygons for maps: one polygon per chosen site.

* Planar coverage: a circle (buffer) of the service distance around each
  chosen site, clipped to the study area when one is given.
* Geodesic coverage: the geodesic circle (points at the service distance on
  the ellipsoid in every direction), in the working CRS.
* Network coverage: the roads reached within the time limit (edges cut at
  the exact remaining time) buffered by the off-road allowance.  This is an
  approximation for display; coverage itself comes from the graph.

The polygons are for display; the coverage relation (:class:`~geocover.values.Reach`)
is what the models use.

>>> import numpy as np
>>> from geocover.values import Sites
>>> s = Sites(np.array([[0.0, 0.0], [100.0, 0.0]]), crs="EPSG:32633")
>>> polys = service_areas((s, [1], 10.0))
>>> len(polys), round(polys[0].area / (np.pi * 100), 2)
(1, 1.0)
"""

from __future__ import annotations

import logging
from typing import Any, Sequence

import numpy as np

from .errors import InputError, ParameterError
from .values import Metric, Reach, Sites

__all__ = ["service_areas", "circle_areas"]

logger = logging.getLogger(__name__)


def _as_clip(clip: Any) -> Any:
    """The study area as one valid geometry: invalid parts repaired as screening repairs them, then united."""
    import shapely

    from .sites import _repair

    if clip is None:
        return None
    if isinstance(clip, shapely.Geometry):
        parts = np.array([clip], dtype=object)
    elif hasattr(clip, "geometry") and hasattr(clip.geometry, "union_all"):  # GeoDataFrame / GeoSeries
        parts = np.asarray(clip.geometry.array, dtype=object)
    else:
        parts = np.asarray(list(clip), dtype=object)
        if not all(isinstance(g, shapely.Geometry) for g in parts):
            raise InputError("clip: expected a shapely polygon (the study area) or a sequence of them")
    # make_valid on each invalid part, keeping a polygon's polygonal part (a spike would add a line), before
    # the union: the union of invalid parts can be a GEOS topology error
    parts = _repair(parts[~shapely.is_missing(parts)], "clip (study area)", [])
    geom = parts[0] if len(parts) == 1 else shapely.union_all(parts)
    if geom is None or geom.is_empty:
        raise InputError("clip: the study area is empty; give the study-area polygon or leave clip unset")
    return geom


def _is_area(value: Any) -> bool:
    import shapely

    return isinstance(value, shapely.Geometry) or hasattr(value, "geometry")


def _chosen(chosen: Any, m: int) -> np.ndarray:
    if chosen is None:
        return np.arange(m, dtype=np.int64)
    idx = np.asarray(chosen, dtype=np.int64).ravel()
    if idx.size and (idx.min() < 0 or idx.max() >= m):
        raise InputError(f"chosen: site indices must lie in 0..{m - 1}, got {idx.min()}..{idx.max()}")
    return idx


def circle_areas(
    xy: np.ndarray, radius_m: float, clip: Any = None, *, quad_segs: int = 32
) -> np.ndarray:
    """Circles of ``radius_m`` around ``xy`` (projected metres), clipped to ``clip``.

    Returns an object array of shapely geometries, one per point; a circle
    wholly outside the clip area becomes an empty polygon.
    """
    import shapely

    radius = float(radius_m)
    if not (np.isfinite(radius) and radius > 0):
        raise ParameterError(f"limit: the service distance must be positive, got {radius_m!r}", "limit")
    pts = shapely.points(np.asarray(xy, dtype=np.float64).reshape(-1, 2))
    circles = shapely.buffer(pts, radius, quad_segs=int(quad_segs))
    geom = _as_clip(clip)
    if geom is not None:
        shapely.prepare(geom)
        circles = shapely.intersection(circles, geom)
    return np.asarray(circles, dtype=object)


def _geodesic_circles(sites: Sites, chosen: np.ndarray, radius: float, n_vertices: int) -> np.ndarray:
    """Geodesic circles in the sites' CRS (lon/lat rings are unwrapped around the centre)."""
    import shapely
    from pyproj import Transformer

    from .coverage import _geod_for, _to_lonlat

    crs = sites.crs
    geod = _geod_for(crs, None)
    lon, lat = _to_lonlat(sites.xy[chosen], crs, "sites")
    az = np.linspace(0.0, 360.0, n_vertices, endpoint=False)
    k = len(chosen)
    lon2, lat2, _ = geod.fwd(
        np.repeat(lon, n_vertices), np.repeat(lat, n_vertices), np.tile(az, k), np.full(k * n_vertices, radius)
    )
    lon2 = lon2.reshape(k, n_vertices)
    lat2 = lat2.reshape(k, n_vertices)
    from .crs import as_crs

    target = as_crs(crs)
    if target.is_geographic:
        # keep each ring continuous around its centre (it may cross the antimeridian)
        lon2 = lon[:, None] + ((lon2 - lon[:, None] + 180.0) % 360.0 - 180.0)
        x, y = lon2, lat2
    else:
        tr = Transformer.from_crs(target.geodetic_crs, target, always_xy=True)
        x, y = tr.transform(lon2, lat2)
    rings = np.stack([np.asarray(x), np.asarray(y)], axis=-1)
    return np.asarray([shapely.make_valid(shapely.Polygon(r)) for r in rings], dtype=object)


def service_areas(
    source: Reach | tuple[Sites, Sequence[int], float],
    chosen: Sequence[int] | Any | None = None,
    clip: Any = None,
    *,
    quad_segs: int = 32,
) -> np.ndarray:
    """One service-area polygon per chosen site.

    Parameters
    ----------
    source : Reach or (Sites, chosen, limit_m)
        A planar, geodesic or network :class:`~geocover.values.Reach` (its
        rule gives the limit, its sites the centres), or a tuple of sites,
        chosen site indices and a planar service distance in metres.
    chosen : sequence of int, optional
        Site indices (with a Reach); all sites when omitted.  With a tuple
        source the tuple's indices are used.  A geometry given here (as in
        ``service_areas((sites, chosen, limit_m), study_area)``) is taken as
        ``clip``.
    clip : shapely geometry, optional
        The study area; the polygons are clipped to it.
    quad_segs : int
        Segments per quarter circle of planar circles (geodesic circles use
        ``8 * quad_segs`` vertices).

    Returns
    -------
    numpy.ndarray of shapely geometries
        In the order of ``chosen``.
    """
    if clip is None and chosen is not None and _is_area(chosen):
        chosen, clip = None, chosen
    if isinstance(source, Reach):
        reach = source
        if reach.sites is None:
            raise InputError("service_areas: this Reach was made from a bare matrix and has no site positions")
        idx = _chosen(chosen, len(reach.sites))
        rule = reach.rule
        if rule.limit is None:
            raise InputError("service_areas: this Reach has no service limit to draw")
        if rule.metric == Metric.PLANAR:
            return circle_areas(reach.sites.xy[idx], rule.limit, clip, quad_segs=quad_segs)
        if rule.metric == Metric.GEODESIC:
            polys = _geodesic_circles(reach.sites, idx, rule.limit, 8 * int(quad_segs))
            geom = _as_clip(clip)
            if geom is not None:
                import shapely

                polys = np.asarray(shapely.intersection(polys, geom), dtype=object)
            return polys
        if rule.metric == Metric.NETWORK:
            from .network import network_service_areas

            return network_service_areas(reach, idx, clip=clip)
        raise InputError(f"service_areas: cannot draw service areas for a {rule.metric.value} Reach")
    try:
        sites, picked, limit = source
    except (TypeError, ValueError):
        raise InputError("service_areas: expected a Reach or a tuple (sites, chosen, limit_m)") from None
    if not isinstance(sites, Sites):
        raise InputError(f"service_areas: the first item must be Sites, got {type(sites).__name__}")
    if chosen is not None:
        raise InputError("service_areas: give the chosen sites inside the tuple, not twice")
    idx = _chosen(picked, len(sites))
    return circle_areas(sites.xy[idx], limit, clip, quad_segs=quad_segs)
