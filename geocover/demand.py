"""Demand points from population grids, census-like areas and weighted point layers.

This is the reading edge of the demand side: it opens files, checks them,
reprojects once to the working CRS (projected, metres) and hands arrays to
the core in :mod:`geocover.grid`.  Every reader returns a
:class:`geocover.values.Demand` whose ``summary`` says how many people went
in, how many came out as points, and what was dropped and why; population is
conserved (``people_out + sum of dropped people == people_in``).
"""

from __future__ import annotations

import enum
import logging
import math
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from .crs import as_crs, choose_working_crs, crs_label, require_projected
from .choices import BadValues, ClipMode, GridValues, Placement
from .errors import CRSError, InputError, LayerError, ParameterError
from .grid import PointBuffer, apply_affine
from .values import Demand

if TYPE_CHECKING:
    import geopandas as gpd

__all__ = [
    "GridValues",
    "ClipMode",
    "BadValues",
    "Placement",
    "demand_from_grid",
    "demand_from_areas",
    "demand_from_points",
]

logger = logging.getLogger(__name__)

#: cells per window when ``window_rows`` is not given (about 32 MB of float64)
WINDOW_CELLS = 1 << 22


def _choice(enum_cls: type[enum.Enum], value: Any, param: str) -> Any:
    if isinstance(value, enum_cls):
        return value
    try:
        return enum_cls(str(value).strip().lower())
    except ValueError:
        valid = ", ".join(repr(m.value) for m in enum_cls)  # type: ignore[attr-defined]
        raise ParameterError(f"{param}: {value!r} is not one of {valid}", param) from None


def _positive_int(value: Any, param: str, allow_none: bool = False) -> int | None:
    if value is None and allow_none:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        if isinstance(value, float) and value.is_integer():
            value = int(value)
        else:
            raise ParameterError(f"{param}: expected a whole number of 1 or more, got {value!r}", param)
    if value < 1:
        raise ParameterError(f"{param}: expected a whole number of 1 or more, got {value!r}", param)
    return int(value)


def _metre_factor(crs: Any) -> float | None:
    """Metres per horizontal CRS unit of a projected CRS, None when it is geographic.

    A compound CRS (projected + vertical) is judged by its horizontal part: a
    height axis in metres must not make a grid in feet look metric.
    """
    if crs.is_geographic:
        return None
    horizontal = crs.sub_crs_list[0] if crs.is_compound and crs.sub_crs_list else crs
    factors = {axis.unit_conversion_factor for axis in horizontal.axis_info}
    return float(next(iter(factors))) if len(factors) == 1 else 1.0


def _working_crs(requested: Any, source_crs: Any, lonlat_centre: tuple[float, float]) -> Any:
    """The working CRS: ``requested``, else the source's if projected in metres, else a local one."""
    if requested is not None:
        return require_projected(requested, "working CRS (crs)")
    factor = _metre_factor(source_crs)
    usable = [source_crs] if factor is not None and abs(factor - 1.0) < 1e-12 else []
    if not usable and factor is not None:
        logger.info("source CRS %s is not in metres; choosing a local projected CRS", crs_label(source_crs))
    return choose_working_crs(None, usable, lonlat_centre)


def _lonlat_centre(crs: Any, x: float, y: float) -> tuple[float, float]:
    from pyproj import Transformer

    if crs.is_geographic:
        tr = Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    else:
        tr = Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
    lon, lat = tr.transform(x, y)
    return float(lon), float(lat)


def _crs_text(crs: Any) -> str:
    auth = crs.to_authority()
    return f"{auth[0]}:{auth[1]}" if auth else crs.to_wkt()


def _log_summary(what: str, summary: dict[str, Any]) -> None:
    dropped = ", ".join(
        f"{reason}: {info.get('people', 0):.6g} people in {info.get('cells', info.get('features', 0))} "
        f"{'cells' if 'cells' in info else 'features'}"
        for reason, info in summary.get("dropped", {}).items()
    ) or "nothing"
    logger.info(
        "%s: %.6g people in, %.6g people out as %d points; dropped %s",
        what,
        summary["people_in"],
        summary["people_out"],
        summary["points"],
        dropped,
    )
    for note in summary.get("notes", []):
        logger.info("%s: %s", what, note)


def _demand(
    label: str,
    started: float,
    *,
    source: Any,
    kind: str,
    src_crs: Any,
    work: Any,
    people_in: float,
    xy: np.ndarray,
    weight: np.ndarray,
    unit: np.ndarray,
    footprint: np.ndarray,
    notes: list[str],
    dropped: dict[str, dict[str, Any]] | None = None,
    **details: Any,
) -> Demand:
    """The Demand a reader returns, with the summary every reader gives (logged at INFO).

    ``balance`` is ``people_in - people_out - sum of dropped people``; one
    formula for every reader, so the conservation check means the same thing.
    """
    dropped = {} if dropped is None else dropped
    people_out = float(np.sum(weight))
    summary: dict[str, Any] = {
        "source": str(source),
        "kind": kind,
        **details,
        "source_crs": _crs_text(src_crs),
        "crs": _crs_text(work),
        "people_in": people_in,
        "people_out": people_out,
        "points": int(len(weight)),
        "dropped": dropped,
        "balance": people_in - people_out - sum(d["people"] for d in dropped.values()),
        "seconds": round(time.perf_counter() - started, 3),
        "notes": notes,
    }
    _log_summary(label, summary)
    return Demand(xy, weight, unit=unit, footprint=footprint, crs=_crs_text(work), summary=summary)


# --------------------------------------------------------------------------- grids


def _default_window_rows(width: int, block_height: int, factor: int) -> int:
    """Rows per window: about WINDOW_CELLS cells, a multiple of the file's block height and of ``factor``.

    When one strip of whole blocks is too wide (over 16 x WINDOW_CELLS), only
    the coarsening factor is kept aligned.
    """
    rows = max(1, WINDOW_CELLS // max(width, 1))
    step = math.lcm(max(block_height, 1), factor)
    if step * width > 16 * WINDOW_CELLS:
        step = factor
    return max(step, rows // step * step)


def _read_clip(clip: Any, grid_crs: Any) -> tuple[Any, int]:
    """The study area as one valid shapely geometry in the grid's CRS, and how many polygons were repaired."""
    import geopandas as gpd
    import shapely

    from .layers import read_vector, to_crs

    frame = clip if isinstance(clip, gpd.GeoDataFrame) else read_vector(clip, what="clip (study area)")
    if frame.crs is None:
        raise CRSError("clip (study area): the GeoDataFrame has no CRS; set one with frame.set_crs('EPSG:...')")
    frame = to_crs(frame, grid_crs, what="clip (study area)")
    geoms = np.asarray(frame.geometry.values, dtype=object)
    geoms = geoms[~shapely.is_missing(geoms)]
    polys = shapely.get_type_id(geoms)
    keep = np.isin(polys, [3, 6, 7])  # Polygon, MultiPolygon, GeometryCollection
    if not keep.any():
        raise LayerError("clip (study area): the layer has no polygons; give a polygon layer of the study area")
    geoms = geoms[keep]
    invalid = ~shapely.is_valid(geoms)
    if invalid.any():
        geoms = geoms.copy()
        geoms[invalid] = shapely.make_valid(geoms[invalid])
    area = shapely.union_all(geoms)
    area = shapely.get_parts(area)
    area = shapely.union_all(area[np.isin(shapely.get_type_id(area), [3, 6])])
    if area.is_empty:
        raise LayerError(
            "clip (study area): the polygons have no area (empty, or nothing left after make_valid); "
            "give a polygon layer that covers the study area"
        )
    return area, int(invalid.sum())


def demand_from_grid(
    path: str | Path,
    band: int = 1,
    *,
    crs: Any = None,
    values: GridValues | str = GridValues.COUNT,
    coarsen: int = 1,
    clip: Any = None,
    clip_mode: ClipMode | str = ClipMode.CENTRE,
    bad_values: BadValues | str = BadValues.ERROR,
    window_rows: int | None = None,
) -> Demand:
    """Weighted demand points from a population raster.

    The grid is read window by window (strips of whole rows), so memory is
    bounded by the window and the points made, not by the grid.  Only cells
    holding people become points.

    Parameters
    ----------
    path : str or Path
        Any raster rasterio opens (GeoTIFF ...), in any CRS and data type.
    band : int
        Band to read, from 1.
    crs : CRS-like, optional
        Working CRS (projected, metres).  Default: the grid's CRS if it is
        projected in metres, else a local projected CRS (logged).
    values : {"count", "density_km2"}
        ``count``: the cell value is people.  ``density_km2``: people per
        km2, multiplied by the cell's area: exact ellipsoidal area for a
        geographic grid, planar area for a projected one.
    coarsen : int
        Sum cells in ``coarsen`` x ``coarsen`` blocks; each block's point
        is at the people-weighted centroid of its cell centres.
    clip : layer, optional
        Study-area polygons (path, ``"path:layer"``, LayerRef or
        GeoDataFrame); people outside are dropped and counted.
    clip_mode : {"centre", "fraction"}
        ``centre``: a cell counts whole when its centre is inside;
        ``fraction``: edge cells count by the share of their area inside.
    bad_values : {"error", "zero"}
        Negative or non-finite counts (other than nodata) stop the read with
        an error, or are counted as zero people.
    window_rows : int, optional
        Rows per window (rounded up to a multiple of ``coarsen``); default
        about four million cells, aligned to the file's blocks.

    Returns
    -------
    Demand
        ``unit`` is the flat index ``row * width + col`` of the source cell
        (the block's top-left cell when coarsened); ``footprint`` is the
        distance from the point to the farthest corner of its cell or block
        (half the diagonal for an uncoarsened cell; a block at the grid's
        right or bottom edge is cut at the edge), an upper bound on how far
        anyone it stands for lives from it.

    Examples
    --------
    >>> demand = demand_from_grid("pop.tif", band=1)  # doctest: +SKIP
    """
    from pyproj import Transformer
    from affine import Affine
    from rasterio.enums import MaskFlags
    from rasterio.errors import RasterioIOError
    from rasterio.windows import Window

    from .grid import (
        block_corners,
        block_points,
        clip_fractions,
        farthest_corner,
        geographic_row_areas,
        half_diagonal,
    )
    from .layers import open_raster

    started = time.perf_counter()
    values = _choice(GridValues, values, "values")
    clip_mode = _choice(ClipMode, clip_mode, "clip_mode")
    bad_values = _choice(BadValues, bad_values, "bad_values")
    factor = _positive_int(coarsen, "coarsen")
    assert factor is not None
    wrows = _positive_int(window_rows, "window_rows", allow_none=True)
    if isinstance(band, bool) or not isinstance(band, (int, np.integer)):
        raise ParameterError(f"band: expected a band number from 1, got {band!r}", "band")

    what = f"population grid {path}"
    with open_raster(path, what=what) as src:
        if not 1 <= band <= src.count:
            raise ParameterError(f"band: {path} has {src.count} band(s); choose a band from 1 to {src.count}", "band")
        bidx = int(band)
        src_crs = as_crs(src.crs.to_wkt(), what)
        transform = src.transform
        height, width = src.height, src.width
        centre = apply_affine(transform, width / 2.0, height / 2.0)
        work = _working_crs(crs, src_crs, _lonlat_centre(src_crs, *centre))
        same_crs = work.equals(src_crs)
        transformer = None if same_crs else Transformer.from_crs(src_crs, work, always_xy=True)
        rotated = bool(transform.b or transform.d)
        notes: list[str] = []
        if not same_crs:
            notes.append(f"points reprojected from {crs_label(src_crs)} to {crs_label(work)}")

        area_km2_const = None
        ellipsoid = None
        if values is GridValues.DENSITY_KM2:
            if src_crs.is_geographic:
                if rotated:
                    raise InputError(
                        f"{what}: the grid is rotated; density grids in a geographic CRS must be north-up. "
                        "Warp it north-up (gdalwarp) or give counts"
                    )
                ell = src_crs.ellipsoid
                ellipsoid = (ell.semi_major_metre, 1.0 / ell.inverse_flattening if ell.inverse_flattening else 0.0)
                notes.append(f"density times ellipsoidal cell area ({ell.name})")
            else:
                mf = _metre_factor(src_crs) or 1.0
                area_km2_const = abs(transform.a * transform.e - transform.b * transform.d) * mf * mf / 1e6
                notes.append(f"density times planar cell area {area_km2_const:.6g} km2 in {crs_label(src_crs)}")

        nodata = src.nodatavals[bidx - 1]
        flags = src.mask_flag_enums[bidx - 1]
        use_mask = MaskFlags.per_dataset in flags or MaskFlags.alpha in flags
        scale = src.scales[bidx - 1] if src.scales else None
        offset = src.offsets[bidx - 1] if src.offsets else None
        scale = 1.0 if scale is None else float(scale)
        offset = 0.0 if offset is None else float(offset)
        scaled = scale != 1.0 or offset != 0.0
        if scaled:
            notes.append(f"applied scale {scale} and offset {offset}")
        is_float = np.issubdtype(np.dtype(src.dtypes[bidx - 1]), np.floating)

        clip_geom = None
        if clip is not None:
            clip_geom, repaired = _read_clip(clip, src_crs)
            if repaired:
                notes.append(f"repaired {repaired} invalid study-area polygon(s) with make_valid")
        frac_mode = clip_mode is ClipMode.FRACTION

        block_h = src.block_shapes[bidx - 1][0] if src.block_shapes else 1
        if wrows is None:
            wrows = _default_window_rows(width, block_h, factor)
        else:
            wrows = -(-wrows // factor) * factor

        # float64 copies only when values change; a plain float32 count grid is masked in place
        need_f64 = scaled or values is GridValues.DENSITY_KM2 or clip_geom is not None or factor > 1
        can_be_bad = is_float or scaled or np.issubdtype(np.dtype(src.dtypes[bidx - 1]), np.signedinteger)
        const_fp = None
        if same_crs and factor == 1:
            const_fp = half_diagonal(transform, 1)

        # the common case (float cells, no mask, no scaling, clipping or coarsening) has a one-pass-per-test path
        plain = const_fp is not None and not need_f64 and not use_mask and is_float

        out = PointBuffer(0)
        sized = False
        people_in = 0.0
        people_clip_out = 0.0
        cells_clip_out = 0
        cells_nodata = 0
        cells_bad = 0
        first_bad: tuple[int, int] | None = None

        # Windows are read one ahead in a helper thread (GDAL decodes while numpy works on the
        # previous window; the dataset is only ever used by that thread), into two buffers that
        # are reused: fresh memory is slow to touch, reused memory is not.
        starts = list(range(0, height, wrows))
        buffers: list[np.ndarray | None] = [None, None]
        scratch: _PlainScratch | None = None  # the plain path's masks and staged weights, reused likewise

        def fetch(j: int) -> tuple[np.ndarray, np.ndarray | None]:
            row_off = starts[j]
            h = min(wrows, height - row_off)
            win = Window(0, row_off, width, h)
            buf = buffers[j % 2]
            if buf is None:
                buf = buffers[j % 2] = np.empty((min(wrows, height), width), dtype=src.dtypes[bidx - 1])
            try:
                raw = src.read(bidx, window=win, out=buf[:h])
                return raw, (src.read_masks(bidx, window=win) if use_mask else None)
            except RasterioIOError as exc:  # a truncated or damaged file opens but cannot be read
                raise LayerError(
                    f"{what}: cannot read rows {row_off}-{row_off + h - 1} of band {bidx} ({exc}); the file looks "
                    "truncated or damaged: is it a complete GeoTIFF? Copy or export it again"
                ) from None

        pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="geocover-read")
        try:
            pending = pool.submit(fetch, 0) if starts else None
            for j, row_off in enumerate(starts):
                raw, mask = pending.result()  # type: ignore[union-attr]
                pending = pool.submit(fetch, j + 1) if j + 1 < len(starts) else None
                h = raw.shape[0]
                scan = None
                if plain and not (cells_bad and bad_values is BadValues.ERROR):
                    # (once a bad cell is seen the general path only counts, the same way)
                    if scratch is None:
                        scratch = _PlainScratch(buffers[0].shape, raw.dtype)  # type: ignore[union-attr]
                    scan = _scan_plain_window(raw, nodata, scratch, h)
                if scan is not None:
                    made, n_nod = scan
                    if not sized:
                        out.reserve(_capacity_guess(made, h, height, width, factor))
                        sized = True
                    if made:
                        out.reserve(made, _expected_points(out.n + made, row_off + h, height))
                        out.stage_rows(scratch.pos[:h], raw, row_off, transform, scratch.weight)  # type: ignore[union-attr]
                    people = float(scratch.weight[:made].sum(dtype=np.float64))  # type: ignore[union-attr]
                    if math.isfinite(people):
                        if made:
                            out.commit(made, scratch.weight, const_fp)  # type: ignore[union-attr]
                        cells_nodata += n_nod
                        people_in += people
                        continue
                    # an infinite count, or a sum past the largest float: the general path reports it
                nod = None
                if mask is not None:
                    nod = mask == 0
                elif nodata is not None:
                    nod = np.isnan(raw) if (is_float and math.isnan(nodata)) else raw == nodata
                counts = raw.astype(np.float64) if (need_f64 and raw.dtype != np.float64) else raw
                if scaled:  # counts is our own float64 window here (need_f64): scale it in place
                    counts *= scale
                    counts += offset
                if nod is not None:
                    n_nod = int(np.count_nonzero(nod))
                    if n_nod:
                        cells_nodata += n_nod
                        np.copyto(counts, 0, where=nod)
                    del nod
                total = None
                if can_be_bad:
                    # two reductions without temporaries tell a clean window: min >= 0 (NaN propagates) and a finite sum
                    lowest = counts.min() if counts.size else 0
                    total = float(counts.sum(dtype=np.float64)) if lowest >= 0 else math.nan
                    if not math.isfinite(total):
                        bad = ~(counts >= 0)  # negative or NaN
                        if is_float or scaled:
                            bad |= np.isinf(counts)
                        nbad = int(np.count_nonzero(bad))
                        if nbad == 0:
                            raise InputError(
                                f"{what}, band {bidx}: the counts in rows {row_off}-{row_off + h - 1} sum past the "
                                "largest float; are these people counts? Rescale the grid"
                            )
                        if first_bad is None:
                            r, c = np.argwhere(bad)[0]
                            first_bad = (row_off + int(r), int(c))
                        cells_bad += nbad
                        np.copyto(counts, 0, where=bad)
                        total = None
                        del bad
                if cells_bad and bad_values is BadValues.ERROR:
                    continue  # keep counting the bad cells for the error message
                if values is GridValues.DENSITY_KM2:
                    if ellipsoid is not None:
                        rows = np.arange(row_off, row_off + h)
                        counts *= (geographic_row_areas(transform, rows, *ellipsoid) / 1e6)[:, None]
                    else:
                        counts *= area_km2_const
                strip_total = float(counts.sum(dtype=np.float64)) if (total is None or values is GridValues.DENSITY_KM2) else total
                people_in += strip_total
                if clip_geom is not None:
                    import shapely

                    wt = transform @ Affine.translation(0, row_off)
                    part = shapely.clip_by_rect(clip_geom, *_window_box(wt, h, width))
                    share = clip_fractions(part, wt, (h, width), fraction=frac_mode)
                    kept = counts * share
                    out_people = strip_total - float(kept.sum())
                    cells_clip_out += int(np.count_nonzero((counts > 0) & (share < 1.0)))
                    people_clip_out += out_people
                    counts = kept
                if const_fp is not None:  # plain cells in the grid's own CRS: centres straight into the output
                    flat = np.flatnonzero(counts > 0)
                    made = len(flat)
                else:
                    pts = block_points(counts, transform, grid_width=width, row_off=row_off, factor=factor)
                    made = len(pts)
                if not sized:
                    out.reserve(_capacity_guess(made, h, height, width, factor))
                    sized = True
                if made == 0:
                    continue
                out.reserve(made, _expected_points(out.n + made, row_off + h, height))
                if const_fp is not None:
                    out.add_cells(flat, row_off * width, counts.reshape(-1)[flat], transform, width, const_fp)
                    del flat
                    continue
                x, y = pts.x, pts.y
                cx, cy = block_corners(transform, pts.row0, pts.col0, factor, grid_shape=(height, width))
                if transformer is not None:
                    x, y = transformer.transform(x, y)
                    cx, cy = transformer.transform(cx, cy)
                    x, y, cx, cy = (np.asarray(v, dtype=np.float64) for v in (x, y, cx, cy))
                out.add_points(x, y, pts.weight, pts.unit, farthest_corner(x, y, cx, cy))

        finally:
            pool.shutdown(wait=True)  # before the dataset closes
        if cells_bad and bad_values is BadValues.ERROR:
            r, c = first_bad  # type: ignore[misc]
            fx, fy = apply_affine(transform, c + 0.5, r + 0.5)
            raise InputError(
                f"{what}, band {bidx}: {cells_bad} cell(s) hold negative or non-finite counts (first at row {r}, "
                f"column {c}, x={fx:.6g}, y={fy:.6g} in {crs_label(src_crs)}); fix the grid, set those cells "
                "to the nodata value, or pass bad_values='zero' to count them as zero people"
            )
        if cells_bad:
            notes.append(f"counted {cells_bad} negative or non-finite cell(s) as zero (bad_values='zero')")

    uniform = out.uniform_footprint
    xy, weight, unit, footprint = out.finish()
    if uniform is not None:  # one footprint for every cell: Demand keeps it as a broadcast, not 8 bytes a point
        footprint = np.float64(uniform)
    dropped: dict[str, dict[str, Any]] = {}
    if cells_nodata:
        dropped["nodata"] = {"cells": cells_nodata, "people": 0.0}
    if cells_bad:
        dropped["bad_values"] = {"cells": cells_bad, "people": 0.0}
    if clip_geom is not None:
        dropped["outside_clip"] = {"cells": cells_clip_out, "people": people_clip_out}
    return _demand(
        what, started, source=path, kind="grid", src_crs=src_crs, work=work, people_in=people_in,
        xy=xy, weight=weight, unit=unit, footprint=footprint, notes=notes, dropped=dropped,
        band=bidx,
        values=values.value,
        grid_shape=[height, width],
        coarsen=factor,
        clip_mode=clip_mode.value if clip_geom is not None else None,
        window_rows=min(wrows, height),
    )


class _PlainScratch:
    """Window-sized buffers of the plain path, made once per read and reused by every window.

    ``pos`` (populated cells) and ``test`` are boolean masks; ``weight``
    takes the populated cells' values, compacted.  Memory that is touched
    again costs nothing; window-sized temporaries made afresh every window
    are first-touched every window, which costs more than the tests.
    """

    def __init__(self, shape: tuple[int, int], dtype: Any) -> None:
        self.pos = np.empty(shape, dtype=bool)
        self.test = np.empty(shape, dtype=bool)
        self.weight = np.empty(shape[0] * shape[1], dtype=dtype)  # only as much as is populated is ever touched


def _scan_plain_window(raw: np.ndarray, nodata: Any, scratch: _PlainScratch, h: int) -> tuple[int, int] | None:
    """``(populated cells, nodata cells)`` of a float window, or None when it holds other values.

    ``scratch.pos[:h]`` is left holding the populated cells (> 0, not
    nodata).  Every cell must be people (> 0), zero or nodata; that is told by
    counting, one pass per test into reused masks, without changing ``raw``
    (masked writes and reductions cost several passes each).  Anything else
    (negative or NaN counts other than nodata) is left to the general path,
    which reports or zeroes it; so is a window whose people do not sum to a
    finite number, which the caller checks once it has the weights.
    """
    pos, test = scratch.pos[:h], scratch.test[:h]
    np.greater(raw, 0, out=pos)
    n_nod = 0
    if nodata is not None:
        if math.isnan(nodata):
            np.isnan(raw, out=test)
        else:
            np.equal(raw, nodata, out=test)
        n_nod = int(np.count_nonzero(test))
        if n_nod and nodata > 0:  # a positive nodata value holds nobody
            np.logical_not(test, out=test)
            np.logical_and(pos, test, out=pos)
    # with nodata 0 the zero cells are the nodata cells, already counted
    n_zero = 0
    if not (nodata is not None and nodata == 0):
        np.equal(raw, 0, out=test)
        n_zero = int(np.count_nonzero(test))
    made = int(np.count_nonzero(pos))
    if raw.size - made - n_zero - n_nod != 0:  # negative or NaN cells (other than nodata)
        return None
    return made, n_nod


def _window_box(wt: Any, h: int, w: int) -> tuple[float, float, float, float]:
    """``(xmin, ymin, xmax, ymax)`` of a window from its transform (rotated grids too), with a cell of margin."""
    xs, ys = apply_affine(wt, np.array([-1.0, w + 1.0, -1.0, w + 1.0]), np.array([-1.0, -1.0, h + 1.0, h + 1.0]))
    return float(xs.min()), float(ys.min()), float(xs.max()), float(ys.max())


def _expected_points(so_far: int, rows_done: int, height: int) -> int:
    """Points expected for the whole grid at the rate seen so far, with a tenth more (a growth hint)."""
    return int(1.1 * so_far * height / max(rows_done, 1)) + 1024


def _capacity_guess(first: int, first_rows: int, height: int, width: int, factor: int) -> int:
    """Room for the points of the whole grid, judged from the first window (untouched room is free)."""
    most = -(-height // factor) * -(-width // factor)
    share = first / max(-(-first_rows // factor) * -(-width // factor), 1)
    return int(min(most, max(1.25 * share * most, 4096)))


# --------------------------------------------------------------------------- areas and points


def _read_layer(layer: Any, what: str) -> "gpd.GeoDataFrame":
    import geopandas as gpd

    from .layers import read_vector

    if isinstance(layer, gpd.GeoDataFrame):
        if layer.crs is None:
            raise CRSError(f"{what}: the GeoDataFrame has no CRS; set the one it was made in with frame.set_crs('EPSG:...')")
        if len(layer) == 0:
            raise LayerError(f"{what}: the GeoDataFrame has no features")
        frame = layer.copy()
        frame.attrs.setdefault("source", "GeoDataFrame")
        return frame
    return read_vector(layer, what=what)


def _id_list(frame: "gpd.GeoDataFrame", rows: np.ndarray, limit: int = 10) -> str:
    labels = [str(v) for v in frame.index.to_numpy()[rows[:limit]]]
    more = f" and {len(rows) - limit} more" if len(rows) > limit else ""
    return ", ".join(labels) + more


def _numeric_field(frame: "gpd.GeoDataFrame", field: str, what: str, param: str) -> np.ndarray:
    """The values of a numeric field, checked: present, numeric, no missing, none negative or infinite."""
    import pandas as pd

    source = frame.attrs.get("source", what)
    if not isinstance(field, str) or not field:
        raise ParameterError(f"{param}: name the field that holds the people, got {field!r}", param)
    if field not in frame.columns or field == frame.geometry.name:
        fields = [c for c in frame.columns if c != frame.geometry.name]
        numeric = [c for c in fields if pd.api.types.is_numeric_dtype(frame[c]) and not pd.api.types.is_bool_dtype(frame[c])]
        raise LayerError(
            f"{what}: {source} has no field {field!r}; its numeric fields are: {', '.join(map(str, numeric)) or 'none'}"
            f" (all fields: {', '.join(map(str, fields)) or 'none'})"
        )
    column = frame[field]
    if pd.api.types.is_bool_dtype(column) or not pd.api.types.is_numeric_dtype(column):
        raise LayerError(
            f"{what}: field {field!r} of {source} is not numeric (type {column.dtype}); store the people as "
            f"numbers (convert the field, e.g. CAST({field} AS REAL) in the GIS)"
        )
    values = column.to_numpy(dtype=np.float64, na_value=np.nan)
    missing = np.flatnonzero(np.isnan(values))
    if len(missing):
        raise LayerError(
            f"{what}: field {field!r} of {source} has no value for {len(missing)} feature(s) (ids {_id_list(frame, missing)}); "
            "fill them in (0 if nobody lives there) or remove those features"
        )
    bad = np.flatnonzero(~np.isfinite(values) | (values < 0))
    if len(bad):
        raise LayerError(
            f"{what}: field {field!r} of {source} is negative or infinite for {len(bad)} feature(s) "
            f"(ids {_id_list(frame, bad)}; first value {values[bad[0]]}); people must be a count of zero or more"
        )
    return values


def _frame_lonlat_centre(frame: "gpd.GeoDataFrame") -> tuple[float, float]:
    xmin, ymin, xmax, ymax = frame.total_bounds
    return _lonlat_centre(as_crs(frame.crs), (xmin + xmax) / 2.0, (ymin + ymax) / 2.0)


def _to_working(frame: "gpd.GeoDataFrame", crs: Any, what: str) -> tuple["gpd.GeoDataFrame", Any, list[str]]:
    from .layers import to_crs

    src_crs = as_crs(frame.crs, what)
    work = _working_crs(crs, src_crs, _frame_lonlat_centre(frame))
    notes = []
    if not work.equals(src_crs):
        notes.append(f"reprojected from {crs_label(src_crs)} to {crs_label(work)}")
        frame = to_crs(frame, work, what=what)
    return frame, work, notes


def demand_from_areas(
    layer: Any,
    population: str,
    *,
    placement: Placement | str = Placement.CENTROID,
    weight_raster: str | Path | None = None,
    spacing_m: float | str | None = None,
    crs: Any = None,
) -> Demand:
    """Demand points from polygons with a population field (census areas, blocks, parishes).

    Parameters
    ----------
    layer : path, ``"path:layer"``, LayerRef or GeoDataFrame
        Polygon layer.
    population : str
        The field holding people per polygon (numeric, none missing or negative).
    placement : {"centroid", "inside", "spread"}
        ``centroid``: one point per polygon at its centroid (for a concave
        polygon it may fall outside).  ``inside``: one point per polygon,
        guaranteed inside (shapely.point_on_surface).  ``spread``: each
        polygon's people split over the cells of ``weight_raster`` in
        proportion to cell value times the share of the cell's area inside
        the polygon, or
        without a raster over a square lattice of ``spacing_m`` by area; the
        shares of a polygon sum to its total and every point lies inside it.
    weight_raster : path, optional
        Land-use or building-density grid for ``spread`` (band 1, values as
        stored: no scale or offset is applied).  Nodata counts as
        zero weight; a polygon with no weight inside falls back to the lattice
        (when ``spacing_m`` is given) or to one inside point, and says so.
    spacing_m : float or str, optional
        Lattice spacing for ``spread`` without a raster (``"500 m"``, ``1000``).
    crs : CRS-like, optional
        Working CRS (projected, metres); default the layer's if projected in
        metres, else a local projected CRS.

    Returns
    -------
    Demand
        ``unit`` is the feature's row in the layer.  ``footprint`` is the
        largest distance from the point to its polygon (its farthest vertex),
        or for spread points to its piece of the polygon (half the cell
        diagonal for a cell wholly inside): an upper bound on how far anyone
        the point stands for lives from it.  Invalid polygons are repaired with
        shapely's make_valid and counted in ``summary["notes"]``.
    """
    import shapely

    from .spread import farthest_vertex, polygonal
    from .units import parse_distance

    started = time.perf_counter()
    placement = _choice(Placement, placement, "placement")
    spacing = None if spacing_m is None else parse_distance(spacing_m, param="spacing_m")
    if spacing is not None and not (math.isfinite(spacing) and spacing > 0):
        raise ParameterError(f"spacing_m: the lattice spacing must be a positive distance, got {spacing_m!r}", "spacing_m")
    if placement is Placement.SPREAD and weight_raster is None and spacing is None:
        raise ParameterError(
            "placement='spread' needs weight_raster (a land-use or building-density grid) or spacing_m "
            "(a lattice spacing such as '500 m')",
            "spacing_m",
        )
    if placement is not Placement.SPREAD and (weight_raster is not None or spacing is not None):
        raise ParameterError(
            f"weight_raster and spacing_m only apply to placement='spread', not {placement.value!r}", "placement"
        )
    what = "population areas"
    frame = _read_layer(layer, what)
    source = frame.attrs.get("source", str(layer))
    people = _numeric_field(frame, population, what, "population")
    geoms = np.asarray(frame.geometry.values, dtype=object)
    notes: list[str] = []

    missing = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    kinds = shapely.get_type_id(geoms)
    if (~missing).any() and np.isin(kinds[~missing], [0, 4]).all():  # empty rows do not hide a point layer
        raise LayerError(f"{what}: {source} holds points, not polygons; use demand_from_points (tool demand-areas reads polygons)")
    not_poly = ~missing & ~np.isin(kinds, [3, 6, 7])
    if not_poly.any():
        rows = np.flatnonzero(not_poly)
        raise LayerError(f"{what}: {source} has {len(rows)} feature(s) that are not polygons (ids {_id_list(frame, rows)}); keep only polygons")
    lost = np.flatnonzero(missing & (people > 0))
    if len(lost):
        raise LayerError(
            f"{what}: {len(lost)} feature(s) of {source} have people but no geometry (ids {_id_list(frame, lost)}); "
            "draw or remove them"
        )
    invalid = ~missing & ~shapely.is_valid(geoms)
    if invalid.any():
        import geopandas as gpd

        geoms = geoms.copy()
        geoms[invalid] = shapely.make_valid(geoms[invalid])
        notes.append(f"repaired {int(invalid.sum())} invalid polygon(s) with make_valid")
        frame[frame.geometry.name] = gpd.GeoSeries(geoms, index=frame.index, crs=frame.crs)

    src_crs = as_crs(frame.crs, what)
    frame, work, crs_notes = _to_working(frame, crs, what)
    notes = crs_notes + notes
    geoms = polygonal(np.asarray(frame.geometry.values, dtype=object))
    populated = np.flatnonzero(people > 0)
    people_in = float(people.sum())
    mode: dict[str, Any] = {"placement": placement.value, "features": int(len(frame)), "features_empty": int(len(frame) - len(populated))}

    degenerate = populated[shapely.is_empty(geoms[populated]) | (shapely.area(geoms[populated]) <= 0)]
    if len(degenerate):
        # a repaired polygon can collapse to nothing; keep its people at a point of what is left
        raw = np.asarray(frame.geometry.values, dtype=object)
        geoms = geoms.copy()
        geoms[degenerate] = raw[degenerate]
        notes.append(f"{len(degenerate)} polygon(s) have no area after repair (ids {_id_list(frame, degenerate)}); "
                     "their people sit at one point of the remaining geometry")

    if placement is Placement.SPREAD:
        xy, weight, unit, footprint, details = _spread(frame, geoms, people, populated, degenerate, weight_raster, spacing, work, notes)
        mode.update(details)
    else:
        g = geoms[populated]
        pts = shapely.centroid(g) if placement is Placement.CENTROID else shapely.point_on_surface(g)
        xy = shapely.get_coordinates(pts)
        weight = people[populated]
        unit = populated.astype(np.int64)
        footprint = farthest_vertex(g, xy)
        if placement is Placement.CENTROID:
            outside = int((~shapely.contains_xy(g, xy[:, 0], xy[:, 1])).sum())
            if outside:
                notes.append(f"{outside} centroid(s) fall outside their polygon (concave shapes); placement='inside' avoids that")
            mode["centroids_outside"] = outside

    return _demand(
        f"{what} {source}", started, source=source, kind="areas", src_crs=src_crs, work=work, people_in=people_in,
        xy=xy, weight=weight, unit=unit, footprint=footprint, notes=notes, population_field=population, **mode,
    )


def _spread(
    frame: "gpd.GeoDataFrame",
    geoms: np.ndarray,
    people: np.ndarray,
    populated: np.ndarray,
    degenerate: np.ndarray,
    weight_raster: Any,
    spacing: float | None,
    work: Any,
    notes: list[str],
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, dict[str, Any]]:
    """Split each populated polygon over raster cells or lattice squares (see demand_from_areas)."""
    import shapely

    from .spread import MAX_CELLS_PER_POLYGON, farthest_vertex, lattice_cells, split_polygon

    xy_parts: list[np.ndarray] = []
    w_parts: list[np.ndarray] = []
    u_parts: list[np.ndarray] = []
    f_parts: list[np.ndarray] = []
    single: list[int] = []
    by_raster = by_lattice = 0
    skip = set(degenerate.tolist())
    cells_of = None
    if weight_raster is not None:
        cells_of = _RasterCells(weight_raster, work)
    try:
        for row in populated.tolist():
            poly = geoms[row]
            part = None
            if row not in skip:
                if cells_of is not None:
                    cells, centres, density = cells_of.around(poly)
                    part = split_polygon(poly, cells, centres, density) if len(cells) else None
                    by_raster += part is not None
                if part is None and spacing is not None:
                    try:
                        cells, centres = lattice_cells(shapely.bounds(poly), spacing)
                    except ValueError as exc:
                        raise ParameterError(
                            f"spacing_m: feature {frame.index[row]} would need {exc.args[0]} lattice cells at "
                            f"{spacing:g} m (limit {MAX_CELLS_PER_POLYGON}); choose a larger spacing",
                            "spacing_m",
                        ) from None
                    part = split_polygon(poly, cells, centres, np.ones(len(cells)))
                    by_lattice += part is not None
            if part is None:
                point = shapely.point_on_surface(poly)
                pxy = shapely.get_coordinates(point).reshape(1, 2)
                xy_parts.append(pxy)
                w_parts.append(np.array([people[row]]))
                f_parts.append(farthest_vertex(np.array([poly], dtype=object), pxy))
                u_parts.append(np.array([row], dtype=np.int64))
                single.append(row)
                continue
            share = part.share
            w = people[row] * share
            w[-1] = people[row] - w[:-1].sum()  # the polygon's total, to the last bit
            if w[-1] < 0:  # cannot happen with shares summing to 1, but never emit negative people
                w = people[row] * share
            xy_parts.append(part.xy)
            w_parts.append(w)
            f_parts.append(part.footprint)
            u_parts.append(np.full(len(w), row, dtype=np.int64))
    finally:
        if cells_of is not None:
            cells_of.close()
    if single:
        why = "no area left after repair, or no weight in the weight raster inside"
        notes.append(
            f"{len(single)} polygon(s) got one inside point ({why}; ids {_id_list(frame, np.array(single))})"
        )
    cat = (lambda parts, dt, shape: np.concatenate(parts) if parts else np.zeros(shape, dtype=dt))
    xy = cat(xy_parts, np.float64, (0, 2))
    details = {
        "spread_by": "weight_raster" if weight_raster is not None else "lattice",
        "spacing_m": spacing,
        "weight_raster": None if weight_raster is None else str(weight_raster),
        "polygons_by_raster": by_raster,
        "polygons_by_lattice": by_lattice,
        "polygons_single_point": len(single),
    }
    return (
        xy,
        cat(w_parts, np.float64, (0,)),
        cat(u_parts, np.int64, (0,)),
        cat(f_parts, np.float64, (0,)),
        details,
    )


class _RasterCells:
    """The cells of a weight raster around a polygon, as quadrilaterals in the working CRS."""

    def __init__(self, path: Any, work: Any) -> None:
        from pyproj import Transformer

        from .layers import open_raster

        self.path = path
        self.src = open_raster(path, what="weight raster")
        try:  # the dataset is closed on any refusal here, not only on the rotated-grid one
            t = self.src.transform
            if t.b or t.d:
                raise LayerError(f"weight raster {path}: the grid is rotated; warp it north-up (gdalwarp) first")
            self.crs = as_crs(self.src.crs.to_wkt(), "weight raster")
            self.same = self.crs.equals(work)
            self.to_src = None if self.same else Transformer.from_crs(work, self.crs, always_xy=True)
            self.to_work = None if self.same else Transformer.from_crs(self.crs, work, always_xy=True)
        except BaseException:
            self.src.close()
            raise

    def close(self) -> None:
        self.src.close()

    def around(self, poly: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        import shapely
        from rasterio.windows import Window

        src = self.src
        geom = poly if self.same else shapely.transform(shapely.segmentize(poly, max(_longest_side(poly) / 50.0, 1e-9)), self._to_src_xy)
        xmin, ymin, xmax, ymax = shapely.bounds(geom)
        # pixel span of the bounds through the inverse affine: any orientation (north-up or south-up)
        cols, rows = apply_affine(~src.transform, np.array([xmin, xmax, xmin, xmax]), np.array([ymin, ymin, ymax, ymax]))
        col0 = max(int(math.floor(cols.min())), 0)
        row0 = max(int(math.floor(rows.min())), 0)
        col1 = min(int(math.ceil(cols.max())), src.width)
        row1 = min(int(math.ceil(rows.max())), src.height)
        empty = (np.zeros(0, dtype=object), np.zeros((0, 2)), np.zeros(0))
        if col1 <= col0 or row1 <= row0:
            return empty
        window = Window(col0, row0, col1 - col0, row1 - row0)
        values = src.read(1, window=window, masked=True).astype(np.float64)
        mask = np.ma.getmaskarray(values)
        data = np.ma.filled(values, 0.0)
        bad = ~mask & (~np.isfinite(data) | (data < 0))
        if bad.any():
            r, c = np.argwhere(bad)[0]
            raise LayerError(
                f"weight raster {self.path}: {int(bad.sum())} cell(s) near the polygons are negative or not finite "
                f"(first at row {row0 + r}, column {col0 + c}); weights must be zero or more (set them to nodata)"
            )
        data[mask] = 0.0
        rr, cc = np.nonzero(data > 0)
        if len(rr) == 0:
            return empty
        rows = (rr + row0).astype(np.float64)
        cols = (cc + col0).astype(np.float64)
        t = src.transform
        corners = [apply_affine(t, cols + dc, rows + dr) for dc, dr in ((0, 0), (1, 0), (1, 1), (0, 1))]
        cx, cy = apply_affine(t, cols + 0.5, rows + 0.5)
        if not self.same:
            corners = [self.to_work.transform(x, y) for x, y in corners]  # type: ignore[union-attr]
            cx, cy = self.to_work.transform(cx, cy)  # type: ignore[union-attr]
        xs = np.stack([np.asarray(x) for x, _ in corners] + [np.asarray(corners[0][0])], axis=1)
        ys = np.stack([np.asarray(y) for _, y in corners] + [np.asarray(corners[0][1])], axis=1)
        quads = shapely.polygons(np.stack([xs, ys], axis=2))
        quads = shapely.make_valid(quads) if not self.same else quads
        density = data[rr, cc] / shapely.area(quads)
        return quads, np.column_stack([cx, cy]), density

    def _to_src_xy(self, coords: np.ndarray) -> np.ndarray:
        x, y = self.to_src.transform(coords[:, 0], coords[:, 1])  # type: ignore[union-attr]
        return np.column_stack([x, y])


def _longest_side(poly: Any) -> float:
    import shapely

    xmin, ymin, xmax, ymax = shapely.bounds(poly)
    return float(max(xmax - xmin, ymax - ymin))


def demand_from_points(layer: Any, weight: str | None, *, crs: Any = None) -> Demand:
    """Demand points straight from a point layer with a weight field (address points, buildings).

    Parameters
    ----------
    layer : path, ``"path:layer"``, LayerRef or GeoDataFrame
        Point (or multipoint) layer.
    weight : str or None
        Field with the people at each point (numeric, none missing or
        negative); None gives every feature a weight of 1.  A multipoint's weight
        is shared equally among its points.
    crs : CRS-like, optional
        Working CRS (projected, metres); default the layer's if projected in
        metres, else a local projected CRS.

    Returns
    -------
    Demand
        ``unit`` is the feature's row, ``footprint`` 0 (true points).
        Features of zero weight make no point and are counted in
        ``summary["features_empty"]``.
    """
    import shapely

    started = time.perf_counter()
    what = "demand points"
    frame = _read_layer(layer, what)
    source = frame.attrs.get("source", str(layer))
    src_crs = as_crs(frame.crs, what)
    if weight is None:
        people = np.ones(len(frame))
    else:
        people = _numeric_field(frame, weight, what, "weight")
    geoms = np.asarray(frame.geometry.values, dtype=object)
    missing = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    kinds = shapely.get_type_id(geoms)
    not_point = ~missing & ~np.isin(kinds, [0, 4])
    if not_point.any():
        rows = np.flatnonzero(not_point)
        hint = "; for polygons use demand_from_areas" if np.isin(kinds[rows], [3, 6]).any() else ""
        raise LayerError(
            f"{what}: {source} has {len(rows)} feature(s) that are not points (ids {_id_list(frame, rows)}){hint}"
        )
    lost = np.flatnonzero(missing & (people > 0))
    if len(lost):
        raise LayerError(f"{what}: {len(lost)} feature(s) of {source} have a weight but no geometry (ids {_id_list(frame, lost)})")
    frame, work, notes = _to_working(frame, crs, what)
    geoms = np.asarray(frame.geometry.values, dtype=object)
    populated = np.flatnonzero((people > 0) & ~missing)
    parts, index = shapely.get_parts(geoms[populated], return_index=True)
    per_feature = np.bincount(index, minlength=len(populated))
    xy = shapely.get_coordinates(parts)
    w = people[populated][index] / per_feature[index]
    if (per_feature > 1).any():
        notes.append(f"{int((per_feature > 1).sum())} multipoint feature(s) shared their weight equally among their points")
    return _demand(
        f"{what} {source}", started, source=source, kind="points", src_crs=src_crs, work=work,
        people_in=float(people.sum()), xy=xy, weight=w, unit=populated[index].astype(np.int64),
        footprint=np.zeros(len(w)), notes=notes,
        weight_field=weight, features=int(len(frame)), features_empty=int(len(frame) - len(populated)),
    )
