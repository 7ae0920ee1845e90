"""Candidate sites: from a layer or a lattice, screened by exclusion zones and land use.

:func:`screen_sites` turns candidate points or parcel polygons, existing
facilities and constraint layers into the :class:`~geocover.values.Sites`
a model may use, and a :class:`~geocover.values.ScreeningRecord` that says,
for every candidate and existing facility, whether it was kept and, if not,
which rule, layer and feature rejected it.

Rules, in the order they are applied (a candidate gets the verdict of the
first rule it fails):

1. ``invalid`` -- no geometry, an empty one, or one that is neither a point
   nor a polygon.  Invalid polygons (self-intersections...) are repaired
   with :func:`shapely.make_valid` and counted, not rejected.
2. ``outside`` -- the site point is not covered by the study area (a point
   on the area's boundary is inside).
3. ``excluded`` -- for each :class:`Exclusion` layer in the order given: the
   site's footprint (the point, or the whole parcel) is *closer than* the
   setback to a zone feature.  A site exactly at the setback distance is
   kept: kept sites satisfy ``shapely.distance(footprint, zone) >= setback``.
   With a setback of 0 a footprint that touches a zone (shares a boundary
   point) is excluded.
4. ``land_use`` -- a point on a cell whose class is not allowed (nodata and
   cells off the raster are never allowed), or a parcel with less than
   ``min_share`` of its area on allowed cells.

Existing facilities are never screened out, whether kept or optional: they
exist, and closing one is the model's decision (for optional ones), not the
screen's.  When one sits in an exclusion zone, outside the study area or on
disallowed land use, screening logs a warning and says so in its record row
and in ``record.notes``.

Minimum spacing is not a screen: the pairs of sites closer than the spacing
go to ``Sites.close_pairs`` and the models forbid opening both.
"""

from __future__ import annotations

import logging
import math
import os
from concurrent.futures import Executor, ThreadPoolExecutor
from contextlib import nullcontext
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Callable, Sequence

import numpy as np
import shapely

from .crs import as_crs, choose_working_crs, crs_label, local_projected_crs, require_projected
from .choices import LatticeShape
from .clearance import NO_GRID, Chunks, ZoneGrid, screen_zones
from .errors import CRSError, InputError, LayerError, ParameterError
from .filters import parse_filter
from .landuse import land_use_shares
from .layers import LayerRef, parse_layer_ref, read_vector, to_crs
from .units import parse_distance, parse_fraction
from .values import ScreeningRecord, SiteRole, Sites, Verdict

if TYPE_CHECKING:
    import geopandas as gpd
    from pyproj import CRS

__all__ = [
    "Exclusion",
    "LandUseMask",
    "LatticeShape",
    "screen_sites",
    "lattice_candidates",
    "close_pairs",
    "screening_summary",
    "screened_sites_frame",
]

logger = logging.getLogger(__name__)

_POINT_TYPES = (0, 4)  # Point, MultiPoint
_POLYGON_TYPES = (3, 6)  # Polygon, MultiPolygon


# --------------------------------------------------------------------------- parameters


def _layer_name(layer: Any) -> str:
    if isinstance(layer, (str, LayerRef)) or hasattr(layer, "__fspath__"):
        ref = parse_layer_ref(layer if not hasattr(layer, "__fspath__") else str(layer))
        return ref.layer or ref.path.stem
    attrs = getattr(layer, "attrs", {})
    source = attrs.get("name") or attrs.get("source")
    if source:
        ref = parse_layer_ref(str(source))
        return ref.layer or ref.path.stem
    return "exclusion"


@dataclass(frozen=True)
class Exclusion:
    """An exclusion-zone layer: sites closer than ``setback_m`` to its features are rejected.

    Parameters
    ----------
    layer : path, "path:layer", LayerRef or GeoDataFrame
        Polygons (or any geometries) of the zones.
    setback_m : float or str
        Minimum distance in metres a kept site keeps from every feature
        (``"50 m"`` and ``"0.1 km"`` are read too).  0 means "not inside and
        not touching".
    where : str, optional
        Attribute filter choosing which features are zones, e.g.
        ``zone_class in ("A", "AE") and depth_m >= 0.5`` (see
        :mod:`geocover.filters`).
    name : str, optional
        Name used in verdicts; defaults to the layer's name.

    >>> Exclusion("flood.gpkg:flood_zones", setback_m="50 m").rule
    'within 50 m of flood_zones'
    """

    layer: Any
    setback_m: float = 0.0
    where: str | None = None
    name: str | None = None

    def __post_init__(self) -> None:
        setback = parse_distance(self.setback_m, param="setback_m")
        if not (math.isfinite(setback) and setback >= 0):
            raise ParameterError(f"setback_m: must be a distance of 0 m or more, got {self.setback_m!r}", "setback_m")
        object.__setattr__(self, "setback_m", float(setback))
        if self.where is not None:
            parse_filter(self.where, "where")  # fail before any layer is read
        if self.name is None:
            object.__setattr__(self, "name", _layer_name(self.layer))

    @property
    def rule(self) -> str:
        """The verdict text, e.g. ``within 50 m of flood_zones where zone_class in ('A', 'AE')``."""
        text = f"within {self.setback_m:g} m of {self.name}" if self.setback_m > 0 else f"inside {self.name}"
        return f"{text} where {self.where}" if self.where else text


@dataclass(frozen=True)
class LandUseMask:
    """A categorical land-use raster and the classes a site may stand on.

    Give exactly one of ``allowed`` or ``forbidden``.  A point site is judged
    by its cell; a parcel by the share of its area on allowed cells, which
    must be at least ``min_share``.  Nodata cells and cells off the raster
    are never allowed.

    >>> LandUseMask("land_use.tif", forbidden=(6, 7)).describe()
    'land use not in classes (6, 7)'
    """

    raster: Any
    allowed: tuple[int, ...] | None = None
    forbidden: tuple[int, ...] | None = None
    min_share: float = 0.5

    def __post_init__(self) -> None:
        if (self.allowed is None) == (self.forbidden is None):
            raise ParameterError(
                "land_use: give either the allowed classes or the forbidden classes (exactly one of them), "
                "e.g. LandUseMask('land_use.tif', allowed=(1, 2, 3))",
                "land_use",
            )
        for name in ("allowed", "forbidden"):
            value = getattr(self, name)
            if value is None:
                continue
            if isinstance(value, (int, np.integer)):
                value = (value,)
            elif isinstance(value, str):  # "1, 2, 3"; iterating the text would read "12" as classes 1 and 2
                value = tuple(v for v in value.replace(",", " ").split())
            try:
                codes = tuple(int(v) for v in value)
                if any(int(v) != float(v) for v in value):
                    raise ValueError
            except (TypeError, ValueError):
                raise ParameterError(f"land_use {name}: expected whole class codes such as (1, 2, 3), got {value!r}", name) from None
            if not codes:
                raise ParameterError(f"land_use {name}: the list of classes is empty", name)
            object.__setattr__(self, name, codes)
        share = parse_fraction(self.min_share, "min_share")
        if share <= 0:
            raise ParameterError("min_share: must be more than 0 % (0 % would keep every parcel)", "min_share")
        object.__setattr__(self, "min_share", share)

    @property
    def name(self) -> str:
        return _layer_name(str(self.raster))

    def describe(self) -> str:
        codes = self.allowed if self.allowed is not None else self.forbidden
        text = ", ".join(str(c) for c in codes)  # type: ignore[union-attr]
        return f"land use in classes ({text})" if self.allowed is not None else f"land use not in classes ({text})"

    def allows(self, values: np.ndarray) -> np.ndarray:
        """Boolean per class code: may a site stand on it (nodata is handled by the caller)."""
        if self.allowed is not None:
            return np.isin(values, self.allowed)
        return ~np.isin(values, self.forbidden)


# --------------------------------------------------------------------------- reading


def _read(value: Any, what: str, allow_empty: bool = False) -> tuple["gpd.GeoDataFrame", str]:
    """A layer as a GeoDataFrame and its short name."""
    import geopandas as gpd

    if isinstance(value, gpd.GeoDataFrame):
        if value.crs is None:
            raise CRSError(f"{what}: the GeoDataFrame has no CRS; set one with frame.set_crs('EPSG:...')")
        if len(value) == 0 and not allow_empty:
            if value.attrs.get("name") == "lattice":
                raise LayerError(
                    f"{what}: the lattice has no point inside the study area; use a smaller lattice spacing"
                )
            raise LayerError(f"{what}: the GeoDataFrame has no features")
        return value, _layer_name(value) if ("name" in value.attrs or "source" in value.attrs) else what
    if isinstance(value, gpd.GeoSeries):
        return _read(gpd.GeoDataFrame(geometry=value), what, allow_empty)
    ref = parse_layer_ref(str(value) if hasattr(value, "__fspath__") else value)
    frame = read_vector(ref, what, allow_empty=allow_empty)
    return frame, ref.layer or ref.path.stem


def _feature_ids(frame: "gpd.GeoDataFrame") -> np.ndarray:
    """The frame's integer index (the fid when read from a file, or the caller's ids), else row positions."""
    index = frame.index
    if np.issubdtype(index.dtype, np.integer):
        return np.asarray(index, dtype=np.int64)
    return np.arange(len(frame), dtype=np.int64)


def _lonlat_centre(frame: "gpd.GeoDataFrame") -> tuple[float, float] | None:
    from pyproj import Transformer

    bounds = frame.total_bounds
    if not np.isfinite(bounds).all():
        return None
    x, y = (bounds[0] + bounds[2]) / 2, (bounds[1] + bounds[3]) / 2
    lon, lat = Transformer.from_crs(frame.crs, "EPSG:4326", always_xy=True).transform(x, y)
    return float(lon), float(lat)


def _working_crs(requested: Any, frame: "gpd.GeoDataFrame", what: str = "candidates") -> "CRS":
    """The requested CRS, else ``frame``'s when projected in metres, else a local one at its centre."""
    if requested is not None:
        return require_projected(requested, "working CRS (crs)")
    crs = as_crs(frame.crs)
    if not crs.is_geographic:
        try:
            return require_projected(crs, f"CRS {crs_label(crs)} of the {what}")
        except CRSError:
            pass  # projected but not in metres: fall through to a local metre CRS
    centre = _lonlat_centre(frame)
    if centre is None:
        raise LayerError(
            f"{what}: no feature has a usable geometry, so no working CRS can be chosen; "
            "give crs='EPSG:...' (a projected CRS in metres) or fix the layer's geometries"
        )
    if crs.is_geographic:
        return choose_working_crs(None, [crs], centre)
    working = local_projected_crs(*centre)
    logger.info("%s' CRS %s is not in metres; working in %s", what, crs_label(crs), crs_label(working))
    return working


def _reproject(frame: "gpd.GeoDataFrame", crs: "CRS", what: str, notes: list[str]) -> "gpd.GeoDataFrame":
    if not as_crs(frame.crs).equals(crs):
        notes.append(f"{what}: reprojected from {crs_label(frame.crs)} to {crs_label(crs)}")
    return to_crs(frame, crs, what)


@dataclass
class _Shapes:
    """What each geometry of a layer is, worked out once."""

    missing: np.ndarray  # bool
    empty: np.ndarray  # bool (False where missing)
    types: np.ndarray  # shapely type id, -1 where missing
    nonfinite: np.ndarray  # bool: a (multi)point with a NaN or infinite coordinate
    point_xy: np.ndarray | None  # (n, 2) coordinates of the single points (NaN elsewhere), when there are no multipoints

    @classmethod
    def of(cls, geoms: np.ndarray, types: np.ndarray | None = None) -> "_Shapes":
        """The shapes of ``geoms``; ``types``: their type ids, when known already."""
        types = shapely.get_type_id(geoms) if types is None else types  # -1 where missing
        # for a point, finite coordinates are all GEOS's validity check looks at, and this is
        # several times faster than shapely.is_valid on many points
        if (types == 0).all():  # single points only (the usual candidate layer)
            coords = shapely.get_coordinates(geoms)
            if len(coords) == len(geoms):  # one coordinate each: none is empty (an empty point has none)
                none = np.zeros(len(geoms), dtype=bool)
                return cls(none, none.copy(), types, ~np.isfinite(coords).all(axis=1), coords)
        missing = types < 0
        empty = np.zeros(len(geoms), dtype=bool)
        empty[~missing] = shapely.is_empty(geoms[~missing])
        pointish = ~missing & ~empty & np.isin(types, _POINT_TYPES)
        nonfinite = np.zeros(len(geoms), dtype=bool)
        point_xy = None
        if pointish.any():
            coords, owner = shapely.get_coordinates(geoms[pointish], return_index=True)
            bad = ~np.isfinite(coords).all(axis=1)
            if bad.any():
                nonfinite[np.flatnonzero(pointish)[np.unique(owner[bad])]] = True
            if len(coords) == int(pointish.sum()):  # one coordinate each: single points
                point_xy = np.full((len(geoms), 2), np.nan)
                point_xy[pointish] = coords
        return cls(missing, empty, types, nonfinite, point_xy)


def _validity(geoms: np.ndarray, shapes: _Shapes, pool: Executor | None, chunk: int | None = None) -> Callable[[], np.ndarray]:
    """Start checking which geometries are invalid (points: see :class:`_Shapes`); call the result to wait for it."""
    others = np.flatnonzero(~shapes.missing & ~shapes.empty & ~np.isin(shapes.types, _POINT_TYPES))
    checks = Chunks(lambda part: ~shapely.is_valid(geoms[others[part]]), len(others), pool, chunk)

    def invalid() -> np.ndarray:
        out = np.zeros(len(geoms), dtype=bool)
        if len(others):
            out[others] = np.concatenate(checks.results())
        return out

    return invalid


def _repair(
    geoms: np.ndarray,
    what: str,
    notes: list[str],
    pool: Executor | None = None,
    shapes: _Shapes | None = None,
    invalid: np.ndarray | None = None,
) -> np.ndarray:
    """Repair invalid geometries in place of the originals (a copy), count and say so.

    Points with a non-finite coordinate cannot be repaired (there is no place
    to put them); they are returned as they are for the caller to reject.
    Returns ``geoms`` itself when nothing needed repair.  ``invalid``: the
    invalid ones, when known already.
    """
    if invalid is None:
        invalid = _validity(geoms, shapes or _Shapes.of(geoms), pool)()
    count = int(invalid.sum())
    if not count:
        return geoms
    geoms = geoms.copy()
    fixed = shapely.make_valid(geoms[invalid])
    # keep the polygonal part of a polygon repaired into a collection of polygons and lines
    original_polygonal = np.isin(shapely.get_type_id(geoms[invalid]), _POLYGON_TYPES)
    for k in np.flatnonzero(original_polygonal & (shapely.get_type_id(fixed) == 7)):
        parts = shapely.get_parts(fixed[k])
        polys = parts[np.isin(shapely.get_type_id(parts), _POLYGON_TYPES)]
        fixed[k] = shapely.union_all(polys) if len(polys) else shapely.Polygon()
    geoms[invalid] = fixed
    message = f"{what}: repaired {count} invalid geometr{'y' if count == 1 else 'ies'} with make_valid"
    logger.warning(message)
    notes.append(message)
    return geoms


def _area_geometry(frame: "gpd.GeoDataFrame", notes: list[str]) -> Any:
    """The union of a study-area layer (already in the working CRS), repaired; refuses an area of 0."""
    parts = _repair(np.asarray(frame.geometry.array, dtype=object), "study area", notes)
    return _checked_area(shapely.union_all(parts[~shapely.is_missing(parts)]))


def _checked_area(area: Any) -> Any:
    """A study area, repaired when invalid (a bow tie's own area is 0 before repair); refuses an area of 0."""
    if area is not None and not area.is_empty and not area.is_valid:
        area = shapely.make_valid(area)
    if area is None or area.is_empty or area.area <= 0:
        raise LayerError(
            "study area: it has no area (no polygon with an area of more than 0); "
            "give a polygon layer or geometry covering the place to study"
        )
    return area


@dataclass
class _Located:
    """Representative points and footprints of a site layer, in the working CRS."""

    xy: np.ndarray  # (n, 2), NaN where invalid
    footprint: np.ndarray  # shapely geometries (None where invalid)
    is_point: np.ndarray  # bool
    invalid: np.ndarray  # reason text, "" when usable
    single: np.ndarray  # bool: a usable single point


def _locate(frame: "gpd.GeoDataFrame", what: str, notes: list[str], before: _Shapes | None = None) -> _Located:
    """The sites' locations; ``before``: the frame's :class:`_Shapes`, when known already."""
    raw = np.asarray(frame.geometry.array, dtype=object)
    before = before or _Shapes.of(raw)
    geoms = _repair(raw, what, notes, shapes=before)
    shapes = before if geoms is raw else _Shapes.of(geoms)
    n = len(geoms)
    types = shapes.types
    is_point = np.isin(types, _POINT_TYPES)
    is_poly = np.isin(types, _POLYGON_TYPES)
    reason = np.full(n, "", dtype=object)
    # later rules override earlier ones
    rules = [
        (~(is_point | is_poly), "geometry is not a point or a polygon"),
        (shapes.nonfinite, "point with a non-finite coordinate"),
        # a polygon that make_valid turned into lines or points had no area to begin with
        (np.isin(before.types, _POLYGON_TYPES) & ~is_poly, "polygon with no area"),
        (shapes.empty, "empty geometry"),
        (shapes.missing, "no geometry"),
    ]
    unusable = np.zeros(n, dtype=bool)
    for mask, text in rules:
        if mask.any():
            reason[mask] = text
            unusable |= mask
    polys = np.flatnonzero(~unusable & is_poly)
    if len(polys):
        area_zero = polys[shapely.area(geoms[polys]) <= 0]
        reason[area_zero] = "polygon with no area"
        unusable[area_zero] = True
    usable = ~unusable
    simple = usable & (types == 0)
    if shapes.point_xy is not None:
        xy = shapes.point_xy
        xy[~simple] = np.nan
    else:
        xy = np.full((n, 2), np.nan)
        xy[simple] = shapely.get_coordinates(geoms[simple])
    other = usable & ~simple
    if other.any():
        xy[other] = shapely.get_coordinates(shapely.point_on_surface(geoms[other]))
    footprint = np.where(usable, geoms, None) if unusable.any() else geoms.copy()
    return _Located(xy, footprint, is_point & usable, reason, simple)


# --------------------------------------------------------------------------- rules


class _ZoneLayer:
    """An exclusion layer read and being checked (in ``pool``, while the caller goes on); see :meth:`zones`.

    An error met while reading is raised by :meth:`zones`, so that errors
    come in the same order as when each layer is read where it is used.
    """

    def __init__(self, rule: Exclusion, crs: "CRS", pool: Executor | None, points: bool = False) -> None:
        self.rule = rule
        self.points = points
        self.notes: list[str] = []
        self.error: BaseException | None = None
        try:
            frame, _ = _read(rule.layer, f"exclusion layer {rule.name}", allow_empty=True)
            ids = _feature_ids(frame)
            if rule.where:
                keep = parse_filter(rule.where, "where").mask(frame, str(rule.name))
                self.notes.append(f"{rule.name}: the filter {rule.where!r} selects {int(keep.sum())} of {len(frame)} features")
                frame, ids = frame[keep], ids[keep]
            frame = _reproject(frame, crs, f"exclusion layer {rule.name}", self.notes)
            self.ids = ids
            self.raw = np.asarray(frame.geometry.array, dtype=object)
            self.shapes = _Shapes.of(self.raw)
            # few big parts: a thread waiting for the lock between the caller's short steps starts each once
            share = -(-len(self.raw) // 2) if pool is not None else None
            self.invalid = _validity(self.raw, self.shapes, pool, max(_CHECK_CHUNK, share or 0))
        except Exception as error:  # noqa: BLE001 -- re-raised by zones()
            self.error = error

    def zones(self, notes: list[str], pool: Executor | None) -> tuple[np.ndarray, np.ndarray, Any]:
        """The zone geometries (after the filter, repaired), their feature ids and, for point sites, their
        zone grid (:data:`~geocover.clearance.NO_GRID` when not built); the layer's notes go to ``notes``.

        While the pool checks the zones' validity, this thread builds the grid of the zones as they
        are (instead of waiting): it is what will be screened unless something needs repair.
        """
        if self.error is not None:
            raise self.error
        notes.extend(self.notes)
        grid = NO_GRID
        if self.points:
            present = ~self.shapes.missing & ~self.shapes.empty & ~self.shapes.nonfinite
            grid = ZoneGrid.build(self.raw[present], float(self.rule.setback_m))
        invalid = self.invalid()
        if invalid.any():  # repaired: not the zones the grid was built for
            grid = NO_GRID
        return (*_finish_zones(self.rule, self.raw, self.shapes, self.ids, invalid, notes, pool), grid)


_CHECK_CHUNK = 8192  # zones checked per task


def _exclusion_layer(
    rule: Exclusion, crs: "CRS", notes: list[str], pool: Executor | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """The zone geometries (after the filter, repaired) and their feature ids."""
    return _ZoneLayer(rule, crs, pool).zones(notes, pool)[:2]


def _finish_zones(
    rule: Exclusion, raw: np.ndarray, shapes: _Shapes, ids: np.ndarray, invalid: np.ndarray, notes: list[str],
    pool: Executor | None,
) -> tuple[np.ndarray, np.ndarray]:
    geoms = _repair(raw, f"exclusion layer {rule.name}", notes, pool, shapes, invalid)
    if geoms is not raw:
        shapes = _Shapes.of(geoms)
    present = ~shapes.missing & ~shapes.empty
    if not present.all():
        notes.append(f"exclusion layer {rule.name}: ignored {int((~present).sum())} feature(s) without geometry")
    if shapes.nonfinite.any():
        notes.append(f"exclusion layer {rule.name}: ignored {int(shapes.nonfinite.sum())} point(s) with a non-finite coordinate")
        present &= ~shapes.nonfinite
    if not present.any():
        logger.warning("exclusion layer %s has no zone features%s", rule.name, " after its filter" if rule.where else "")
    return geoms[present], ids[present]


# --------------------------------------------------------------------------- helpers


def close_pairs(xy: Any, min_spacing_m: float) -> np.ndarray:
    """Pairs of sites closer than ``min_spacing_m`` (strictly), as a ``(k, 2)`` int64 array.

    Each pair ``(i, j)`` has ``i < j``; rows are sorted.  Sites exactly
    ``min_spacing_m`` apart are not a pair.

    >>> close_pairs([[0, 0], [3, 4], [100, 0]], 6).tolist()
    [[0, 1]]
    >>> close_pairs([[0, 0], [3, 4]], 5).tolist()
    []
    """
    from scipy.spatial import cKDTree

    pts = np.asarray(xy, dtype=np.float64).reshape(-1, 2)
    spacing = parse_distance(min_spacing_m, param="min_spacing_m")
    if not (math.isfinite(spacing) and spacing >= 0):
        raise ParameterError(f"min_spacing_m: must be a distance of 0 m or more, got {min_spacing_m!r}", "min_spacing_m")
    if len(pts) < 2 or spacing == 0:
        return np.zeros((0, 2), dtype=np.int64)
    pairs = cKDTree(pts).query_pairs(spacing, output_type="ndarray").astype(np.int64)
    if len(pairs):
        gap = np.hypot(*(pts[pairs[:, 0]] - pts[pairs[:, 1]]).T)
        pairs = np.sort(pairs[gap < spacing], axis=1)
        pairs = pairs[np.lexsort((pairs[:, 1], pairs[:, 0]))]
    return np.ascontiguousarray(pairs.reshape(-1, 2))


def _field(frame: "gpd.GeoDataFrame", name: str, what: str, param: str) -> Any:
    if name not in frame.columns:
        fields = [str(c) for c in frame.columns if c != frame.geometry.name]
        raise ParameterError(f"{param}: {what} has no field {name!r}; its fields are: {', '.join(fields) or 'none'}", param)
    return frame[name]


def _costs(frame: "gpd.GeoDataFrame", field: str | None, default: float, what: str, notes: list[str], required: bool) -> np.ndarray:
    import pandas as pd

    n = len(frame)
    if field is None or (not required and field not in frame.columns):
        return np.full(n, float(default))
    column = _field(frame, field, what, "cost_field")
    values = pd.to_numeric(column, errors="coerce").to_numpy(dtype=np.float64)
    text_bad = column.notna().to_numpy() & np.isnan(values)
    if text_bad.any():
        row = int(np.flatnonzero(text_bad)[0])
        raise InputError(
            f"cost_field: {what} field {field!r} holds {column.iloc[row]!r} at feature {int(_feature_ids(frame)[row])}, "
            "not a number; give a number (or leave it empty for the default cost)"
        )
    missing = np.isnan(values)
    if missing.any():
        notes.append(f"{what}: {int(missing.sum())} empty value(s) in {field!r} take the default cost {default:g}")
        values[missing] = default
    if (values < 0).any() or not np.isfinite(values).all():
        row = int(np.flatnonzero((values < 0) | ~np.isfinite(values))[0])
        raise InputError(
            f"cost_field: {what} field {field!r} has cost {values[row]} at feature {int(_feature_ids(frame)[row])}; "
            "costs must be finite and 0 or more"
        )
    return values


def _labels(frame: "gpd.GeoDataFrame", field: str | None, prefix: str, ids: np.ndarray, what: str, required: bool) -> np.ndarray:
    default = np.empty(len(ids), dtype=object)
    default[:] = [f"{prefix}_{i}" for i in ids.tolist()]  # Python ints format twice as fast as numpy's
    if field is None or (not required and field not in frame.columns):
        return default
    column = _field(frame, field, what, "label_field")
    values = np.array([str(v) if v is not None and v == v else "" for v in column], dtype=object)
    return np.where(values == "", default, values)


_ROLE_WORDS = {
    "kept": SiteRole.KEPT,
    "keep": SiteRole.KEPT,
    "existing_kept": SiteRole.KEPT,
    "optional": SiteRole.OPTIONAL,
    "existing_optional": SiteRole.OPTIONAL,
}


def _role(value: Any, param: str) -> SiteRole:
    if isinstance(value, SiteRole) and value in (SiteRole.KEPT, SiteRole.OPTIONAL):
        return value
    role = _ROLE_WORDS.get(str(value).strip().lower())
    if role is None:
        raise ParameterError(f"{param}: {value!r} is not a role of an existing site; use 'kept' or 'optional'", param)
    return role


def _roles(frame: "gpd.GeoDataFrame", field: str | None, default: SiteRole, notes: list[str]) -> np.ndarray:
    n = len(frame)
    if field is None:
        return np.full(n, int(default), dtype=np.int8)
    column = _field(frame, field, "existing sites layer", "existing_role_field")
    out = np.full(n, int(default), dtype=np.int8)
    empty = 0
    for i, value in enumerate(column):
        if value is None or (isinstance(value, float) and math.isnan(value)) or str(value).strip() == "":
            empty += 1
            continue
        role = _ROLE_WORDS.get(str(value).strip().lower())
        if role is None:
            raise InputError(
                f"existing_role_field: existing sites field {field!r} holds {value!r} at feature {int(_feature_ids(frame)[i])}; "
                "use 'kept' or 'optional' (or leave it empty for the default role)"
            )
        out[i] = int(role)
    if empty:
        notes.append(f"existing sites: {empty} empty role value(s) in {field!r} take the default role {default.label}")
    return out


# --------------------------------------------------------------------------- screening


def screen_sites(
    candidates: Any,
    *,
    exclude: Sequence[Exclusion] | Exclusion = (),
    land_use: LandUseMask | None = None,
    existing: Any = None,
    existing_role_field: str | None = None,
    existing_role: str | SiteRole = "kept",
    cost_field: str | None = None,
    default_cost: float = 1.0,
    study_area: Any = None,
    min_spacing_m: float | None = None,
    label_field: str | None = None,
    existing_label_field: str | None = None,
    crs: Any = None,
    threads: int | None = None,
) -> tuple[Sites, ScreeningRecord]:
    """Screen candidate sites and return the usable ones with a verdict for every one.

    Parameters
    ----------
    candidates : path, "path:layer", LayerRef, GeoDataFrame or None
        Candidate points, or parcel polygons (a parcel stands at a point
        inside it, and its whole footprint is screened).  ``None`` with
        ``existing`` given screens today's facilities only (for an audit).
    exclude : Exclusion or sequence of Exclusion
        Exclusion-zone layers with setbacks and filters, tried in order.
    land_use : LandUseMask, optional
        Categorical raster and allowed (or forbidden) classes.
    existing : layer, optional
        Existing facilities (points or polygons).  They come first in the
        returned sites and are never screened out (see the module notes).
    existing_role_field : str, optional
        Field of ``existing`` holding "kept" or "optional" per facility;
        empty values take ``existing_role``.
    existing_role : "kept" or "optional"
        Role of existing facilities without a role value.
    cost_field : str, optional
        Field with the opening cost.  Candidates must have it; existing
        facilities use it when present, else cost 0.
    default_cost : float
        Candidates' cost when there is no ``cost_field`` (or the value is
        empty).
    study_area : layer or shapely geometry, optional
        Sites whose point is not inside (or on the boundary of) its union are
        rejected as ``outside``.  A bare shapely geometry is taken to be in
        the working CRS.
    min_spacing_m : float or str, optional
        Pairs of sites closer than this go to ``Sites.close_pairs``: the
        models open at most one of each pair.  Pairs of two kept facilities
        are left out (both are open anyway); a kept-optional pair stays, so
        an optional facility too close to a kept one is closed.
    label_field : str, optional
        Field with site names (candidates must have it; existing facilities
        use it when present and ``existing_label_field`` is not given).
    existing_label_field : str, optional
        Field with the existing facilities' names (they must have it).
    crs : CRS-like, optional
        Working CRS (projected, metres).  Default: the candidates' CRS when
        it is projected in metres, else a local UTM zone.
    threads : int, optional
        Threads for checking the zones and measuring the sites' distances to
        them (GEOS and large numpy operations release Python's lock).
        Default: the usable cores, at most 4; 1 runs everything in this
        thread.  The result is the same whatever the number.

    Returns
    -------
    sites : Sites
        Existing facilities (indices ``0..k-1``), then kept candidates in
        input order.  ``source`` is the feature id in the source layer.
    record : ScreeningRecord
        One row per existing facility then per candidate, in input order.

    Raises
    ------
    InputError
        When no candidate is left after screening (the message says which
        rule removed how many), or a layer, field or value is unusable.
    """
    count = _threads(threads)
    with ThreadPoolExecutor(count) if count > 1 else nullcontext() as pool:
        return _screen_sites(
            candidates, exclude, land_use, existing, existing_role_field, existing_role, cost_field, default_cost,
            study_area, min_spacing_m, label_field, existing_label_field, crs, pool,
        )


def _screen_sites(
    candidates: Any,
    exclude: Sequence[Exclusion] | Exclusion,
    land_use: LandUseMask | None,
    existing: Any,
    existing_role_field: str | None,
    existing_role: str | SiteRole,
    cost_field: str | None,
    default_cost: float,
    study_area: Any,
    min_spacing_m: float | None,
    label_field: str | None,
    existing_label_field: str | None,
    crs: Any,
    pool: Executor | None,
) -> tuple[Sites, ScreeningRecord]:
    """:func:`screen_sites` with its thread pool (None: all in this thread)."""
    notes: list[str] = []
    rules = [exclude] if isinstance(exclude, Exclusion) else list(exclude)
    names = [str(getattr(rule, "name", "")) for rule in rules]
    for name in names:
        if names.count(name) > 1:
            raise ParameterError(
                f"exclude: {names.count(name)} exclusion layers are named {name!r}; give each its own "
                "name=... so that verdicts say which one rejected a site",
                "exclude",
            )
    for rule in rules:
        if not isinstance(rule, Exclusion):
            raise ParameterError(f"exclude: expected Exclusion(...) items, got {type(rule).__name__}", "exclude")
    if land_use is not None and not isinstance(land_use, LandUseMask):
        raise ParameterError(f"land_use: expected LandUseMask(...), got {type(land_use).__name__}", "land_use")
    default_role = _role(existing_role, "existing_role")
    try:
        cost_ok = math.isfinite(float(default_cost)) and float(default_cost) >= 0
    except (TypeError, ValueError):
        cost_ok = False
    if not cost_ok:
        raise ParameterError(f"default_cost: must be a number of 0 or more, got {default_cost!r}", "default_cost")
    spacing = None if min_spacing_m is None else parse_distance(min_spacing_m, param="min_spacing_m")
    if spacing is not None and not (math.isfinite(spacing) and spacing >= 0):  # before any layer is read
        raise ParameterError(f"min_spacing_m: must be a distance of 0 m or more, got {min_spacing_m!r}", "min_spacing_m")

    only_existing = candidates is None
    ex = None
    if existing is not None:
        ex, _ = _read(existing, "existing sites", allow_empty=True)
    if only_existing:
        if ex is None:
            raise ParameterError("candidates: give candidate sites, existing facilities, or both", "candidates")
        cand, cand_name = ex.iloc[0:0].copy(), "candidates"
    else:
        cand, cand_name = _read(candidates, "candidates", allow_empty=ex is not None)
    # with no candidate features (an audit of today's facilities) the existing ones place the working CRS
    if len(cand) or ex is None:
        working = _working_crs(crs, cand)
    else:
        working = _working_crs(crs, ex, "existing sites")
    cand = _reproject(cand, working, "candidates", notes)
    # with threads, the zone layers are read now and checked while the sites are prepared
    cand_geoms = np.asarray(cand.geometry.array, dtype=object)
    cand_types = shapely.get_type_id(cand_geoms)
    layers = [_ZoneLayer(rule, working, pool, bool((cand_types == 0).any())) for rule in rules] if pool is not None else None
    cand_shapes = _Shapes.of(cand_geoms, cand_types)
    cand_ids = _feature_ids(cand)
    cand_cost = _costs(cand, cost_field, float(default_cost), "candidates layer", notes, required=not only_existing)
    if label_field is None and cand.attrs.get("name") == "lattice" and "label" in cand.columns:
        label_field = "label"  # lattice points carry their own row/column labels
    cand_label = _labels(cand, label_field, "candidate", cand_ids, "candidates layer", required=not only_existing)
    cand_loc = _locate(cand, "candidates", notes, cand_shapes)

    if ex is not None:
        ex = _reproject(ex, working, "existing sites", notes)
        ex_ids = _feature_ids(ex)
        ex_cost = _costs(ex, cost_field, 0.0, "existing sites layer", notes, required=False)
        if existing_label_field is not None:
            ex_label = _labels(ex, existing_label_field, "existing", ex_ids, "existing sites layer", required=True)
        else:
            ex_label = _labels(ex, label_field, "existing", ex_ids, "existing sites layer", required=False)
        ex_role = _roles(ex, existing_role_field, default_role, notes)
        ex_loc = _locate(ex, "existing sites", notes)
        bad = np.flatnonzero(ex_loc.invalid != "")
        if len(bad):
            raise LayerError(
                f"existing sites: feature {int(ex_ids[bad[0]])} has {ex_loc.invalid[bad[0]]} "
                f"({len(bad)} such feature(s)); an existing facility needs a point or polygon location"
            )
    else:
        ex_ids = np.zeros(0, dtype=np.int64)
        ex_cost = np.zeros(0)
        ex_label = np.zeros(0, dtype=object)
        ex_role = np.zeros(0, dtype=np.int8)
        none = np.zeros(0, dtype=bool)
        ex_loc = _Located(np.zeros((0, 2)), np.zeros(0, dtype=object), none, np.zeros(0, dtype=object), none)

    k, n = len(ex_ids), len(cand_ids)
    total = k + n
    xy = np.concatenate([ex_loc.xy, cand_loc.xy])
    footprint = np.concatenate([ex_loc.footprint, cand_loc.footprint])
    located = _Located(xy, footprint, np.concatenate([ex_loc.is_point, cand_loc.is_point]),
                       np.concatenate([ex_loc.invalid, cand_loc.invalid]), np.concatenate([ex_loc.single, cand_loc.single]))
    usable = located.invalid == ""

    verdict = np.full(total, Verdict.KEPT.value, dtype=object)
    rule_text = np.full(total, "", dtype=object)
    layer = np.full(total, "", dtype=object)
    feature = np.full(total, -1, dtype=np.int64)
    inval = ~usable
    verdict[inval] = Verdict.INVALID.value
    rule_text[inval] = located.invalid[inval]
    layer[inval] = cand_name
    kept = usable.copy()  # verdict == "kept", without comparing strings

    def reject(mask: np.ndarray, what: Verdict, text: Any, name: str, feat: Any = -1) -> None:
        new = mask & kept
        kept[new] = False
        verdict[new] = what.value
        rule_text[new] = text[new] if isinstance(text, np.ndarray) else text
        layer[new] = name
        feature[new] = feat[new] if isinstance(feat, np.ndarray) else feat

    # study area
    if study_area is not None:
        if isinstance(study_area, shapely.Geometry):
            area_geom, area_name = _checked_area(study_area), "study_area"
        else:
            area_frame, area_name = _read(study_area, "study area")
            area_geom = _area_geometry(_reproject(area_frame, working, "study area", notes), notes)
        shapely.prepare(area_geom)
        inside = np.zeros(total, dtype=bool)
        inside[usable] = shapely.covers(area_geom, shapely.points(xy[usable]))
        reject(usable & ~inside, Verdict.OUTSIDE, f"outside {area_name}", area_name)

    # exclusion zones
    nearest = np.full(total, np.inf)
    rows = np.flatnonzero(usable)
    zones: dict[str, np.ndarray] = {}
    for j, rule in enumerate(rules):
        if layers is not None:
            geoms, ids, grid = layers[j].zones(notes, pool)
        else:
            (geoms, ids), grid = _exclusion_layer(rule, working, notes), NO_GRID
        zones[str(rule.name)] = geoms
        hits = screen_zones(footprint, xy, rows, geoms, ids, rule.setback_m, pool=pool, grid=grid, single=located.single)
        nearest = np.minimum(nearest, hits.nearest)
        reject(hits.hit, Verdict.EXCLUDED, rule.rule, str(rule.name), hits.feature)

    # land use
    share = np.full(total, np.nan)
    if land_use is not None:
        share, worst = land_use_shares(land_use, located.footprint, located.is_point, rows, working, notes)
        fails = usable & (share < land_use.min_share - 1e-12)
        text = np.where(
            located.is_point,
            f"not on {land_use.describe()}",
            f"less than {land_use.min_share:.0%} of the parcel on {land_use.describe()}",
        ).astype(object)
        reject(fails, Verdict.LAND_USE, text, land_use.name, worst)

    # existing facilities stay, flagged
    for i in range(k):
        role = SiteRole(int(ex_role[i]))
        tag = f"existing ({'kept' if role == SiteRole.KEPT else 'optional'})"
        if verdict[i] != Verdict.KEPT.value:
            if verdict[i] == Verdict.EXCLUDED.value:
                where = f"{layer[i]}, feature {feature[i]}"
            elif verdict[i] == Verdict.LAND_USE.value:  # the feature is the class code there, -1 for none
                where = f"{layer[i]}, {'nodata or off the raster' if feature[i] < 0 else f'class {feature[i]}'}"
            else:
                where = str(layer[i])
            message = f"existing site {ex_label[i]} is kept although it is {rule_text[i]} ({where})"
            logger.warning(message)
            notes.append(message)
            rule_text[i] = f"{tag}, flagged: {rule_text[i]}"
            verdict[i] = Verdict.KEPT.value
        else:
            rule_text[i] = tag

    kept_cand = np.flatnonzero(kept[k:])
    if n and not len(kept_cand):
        raise InputError(_empty_message(n, verdict[k:], rule_text[k:]))

    site_index = np.full(total, -1, dtype=np.int64)
    site_index[:k] = np.arange(k)
    site_index[k + kept_cand] = k + np.arange(len(kept_cand))
    take = np.concatenate([np.arange(k), k + kept_cand])
    roles = np.concatenate([ex_role, np.full(len(kept_cand), int(SiteRole.CANDIDATE), dtype=np.int8)])
    pairs = np.zeros((0, 2), dtype=np.int64)
    if spacing:
        pairs = close_pairs(xy[take], spacing)
        # two kept sites are open whatever the model does: such a pair could only make it infeasible
        both_kept = (roles[pairs[:, 0]] == SiteRole.KEPT) & (roles[pairs[:, 1]] == SiteRole.KEPT)
        if both_kept.any():
            notes.append(
                f"minimum spacing: {int(both_kept.sum())} pair(s) of kept existing sites are closer than "
                f"{spacing:g} m; both stay open, so they are not a constraint"
            )
            pairs = pairs[~both_kept]
    label = np.concatenate([ex_label, cand_label])
    working_label = crs_label(working)
    sites = Sites(
        xy[take],
        cost=np.concatenate([ex_cost, cand_cost[kept_cand]]),
        role=roles,
        label=label[take],
        source=np.concatenate([ex_ids, cand_ids[kept_cand]]),
        crs=working_label,
        close_pairs=pairs,
    )
    record = ScreeningRecord(
        xy, verdict, rule_text, layer, feature, nearest, site_index, label=label, crs=working_label,
        land_use_share=share, notes=tuple(notes), zones=zones,
    )
    logger.info(
        "screened %d candidate(s): %d kept; %d existing site(s)%s",
        n, len(kept_cand), k, f"; {len(pairs)} close pair(s) under {spacing:g} m" if spacing else "",
    )
    return sites, record


def _threads(value: Any) -> int:
    """The number of threads: ``value`` checked, or the usable cores (at most 4) when None."""
    if value is None:
        cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
        return max(1, min(4, cores))
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
        raise ParameterError(f"threads: must be a whole number, 1 or more, got {value!r}", "threads")
    return int(value)


def _empty_message(n: int, verdict: np.ndarray, rule: np.ndarray) -> str:
    keys, counts = np.unique(np.stack([verdict.astype(str), rule.astype(str)], axis=1), axis=0, return_counts=True)
    order = np.argsort(-counts, kind="stable")
    parts = [f"{int(counts[i])} {keys[i, 1]} ({keys[i, 0]})" for i in order]
    return (
        f"no candidate site is left after screening all {n}: " + "; ".join(parts)
        + ". Relax a rule (a smaller setback, a filter, more allowed land-use classes) or check that the "
        "layers cover the same place"
    )


def screening_summary(record: ScreeningRecord) -> list[dict[str, Any]]:
    """Counts per verdict and rule: the kept first, then rejections, most frequent first.

    Each item is ``{"verdict", "rule", "layer", "count"}``; existing
    facilities are counted under their own ``existing (...)`` rules.
    """
    if not len(record):
        return []
    keys = np.stack([record.verdict.astype(str), record.rule.astype(str), record.layer.astype(str)], axis=1)
    uniq, counts = np.unique(keys, axis=0, return_counts=True)
    items = [{"verdict": str(u[0]), "rule": str(u[1]), "layer": str(u[2]), "count": int(c)} for u, c in zip(uniq, counts)]
    items.sort(key=lambda d: (d["verdict"] != Verdict.KEPT.value, -d["count"], d["rule"]))
    return items


def screened_sites_frame(record: ScreeningRecord, sites: Sites | None = None) -> "gpd.GeoDataFrame":
    """The ``screened_sites`` layer (see :func:`geocover.outputs.screened_sites_layer`)."""
    from .outputs import screened_sites_layer

    return screened_sites_layer(record, None, sites)


# --------------------------------------------------------------------------- lattice


def lattice_candidates(
    study_area: Any,
    spacing_m: float | str,
    *,
    shape: str | LatticeShape = "square",
    crs: Any = None,
) -> "gpd.GeoDataFrame":
    """Candidate points on a square or hexagonal lattice over a study area.

    The lattice starts half a spacing in from the lower-left corner of the
    area's bounding box: square points at ``(minx + s/2 + i s, miny + s/2 + j s)``;
    hexagonal rows ``h = s * sqrt(3) / 2`` apart starting at ``miny + h/2``,
    odd rows shifted by ``s/2``, so every point has its neighbours ``s``
    away.  Points covered by the area (its boundary included) are kept.

    Parameters
    ----------
    study_area : layer, GeoDataFrame or shapely geometry
        The area (a bare geometry needs ``crs``).
    spacing_m : float or str
        Distance between neighbouring points, e.g. ``500`` or ``"2 km"``.
    shape : "square" or "hex"
    crs : CRS-like, optional
        Working CRS (default: the area's when projected in metres, else a
        local UTM zone).

    Returns
    -------
    GeoDataFrame
        Points with ``label``, ``lattice_row`` and ``lattice_col``, in the
        working CRS, usable as ``candidates`` of :func:`screen_sites`.

    >>> from shapely import box
    >>> len(lattice_candidates(box(0, 0, 1000, 500), 100, crs="EPSG:32626"))
    50
    """
    import geopandas as gpd

    spacing = parse_distance(spacing_m, param="spacing_m")
    if not (math.isfinite(spacing) and spacing > 0):
        raise ParameterError(f"spacing_m: must be a distance above 0 m, got {spacing_m!r}", "spacing_m")
    try:
        kind = LatticeShape(str(getattr(shape, "value", shape)).lower())
    except ValueError:
        raise ParameterError(
            f"shape: {shape!r} is not a lattice shape; use one of {', '.join(s.value for s in LatticeShape)}", "shape"
        ) from None
    notes: list[str] = []
    if isinstance(study_area, shapely.Geometry):
        if crs is None:
            raise CRSError("lattice_candidates: a bare geometry as study area needs crs='EPSG:...'")
        working = require_projected(crs, "working CRS (crs)")
        area = _checked_area(study_area)
    else:
        frame, _ = _read(study_area, "study area")
        working = _working_crs(crs, frame, "study area")
        area = _area_geometry(_reproject(frame, working, "study area", notes), notes)
    minx, miny, maxx, maxy = area.bounds
    dy = spacing if kind is LatticeShape.SQUARE else spacing * math.sqrt(3.0) / 2.0
    n_rows = int(math.floor((maxy - miny) / dy + 0.5))
    n_cols = int(math.floor((maxx - minx) / spacing + 0.5))
    if n_rows * max(n_cols, 1) > 20_000_000:
        raise ParameterError(
            f"spacing_m: {spacing:g} m would put about {n_rows * n_cols:,} points over the study area; "
            "use a larger spacing (or split the area)",
            "spacing_m",
        )
    row = np.arange(n_rows + 1)  # one spare row and column; the coverage test trims them
    col = np.arange(n_cols + 1)
    rr, cc = np.meshgrid(row, col, indexing="ij")
    rr, cc = rr.ravel(), cc.ravel()
    shift = np.where((kind is LatticeShape.HEX) & (rr % 2 == 1), spacing / 2.0, 0.0)
    x = minx + spacing / 2.0 + cc * spacing + shift
    y = miny + dy / 2.0 + rr * dy
    shapely.prepare(area)
    inside = shapely.covers(area, shapely.points(x, y))
    rr, cc, x, y = rr[inside], cc[inside], x[inside], y[inside]
    logger.info("lattice: %d %s point(s) %g m apart over the study area", len(x), kind.value, spacing)
    out = gpd.GeoDataFrame(
        {"label": [f"L{r}_{c}" for r, c in zip(rr, cc)], "lattice_row": rr, "lattice_col": cc},
        geometry=shapely.points(x, y),
        crs=working,
    )
    out.attrs["name"] = "lattice"
    return out
