"""Land-use share of candidate sites: the class under a point, the allowed share of a parcel.

:func:`land_use_shares` is the land-use rule of :func:`geocover.sites.screen_sites`
(the :class:`~geocover.sites.LandUseMask` says which classes are allowed).  It
reads the categorical raster once in the window under all sites, or in tiles
of sites when that window is very large, and never warps the raster: the
footprints are reprojected into the raster's CRS instead.
"""

from __future__ import annotations

import logging
from typing import TYPE_CHECKING, Any

import numpy as np
import shapely

from .crs import as_crs, crs_label
from .errors import LayerError
from .layers import open_raster

if TYPE_CHECKING:
    from pyproj import CRS

    from .sites import LandUseMask

__all__ = ["land_use_shares"]

logger = logging.getLogger(__name__)


def _affine(t: Any, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Apply an affine transform to coordinate arrays."""
    return t.a * x + t.b * y + t.c, t.d * x + t.e * y + t.f


def _cell_polygons(transform: Any, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """Cell outlines (any affine transform) for cells at ``rows``, ``cols``."""
    corners_c = np.stack([cols, cols + 1, cols + 1, cols, cols], axis=1).astype(np.float64)
    corners_r = np.stack([rows, rows, rows + 1, rows + 1, rows], axis=1).astype(np.float64)
    x, y = _affine(transform, corners_c, corners_r)
    return shapely.polygons(np.stack([x, y], axis=2))


_MAX_WINDOW_CELLS = 50_000_000  # read the raster in tiles of sites beyond this many cells at once
_TILE_CELLS = 4096  # side of such a tile, in cells


def land_use_shares(
    mask: "LandUseMask", footprint: np.ndarray, is_point: np.ndarray, rows: np.ndarray, crs: "CRS", notes: list[str]
) -> tuple[np.ndarray, np.ndarray]:
    """Share of each footprint (at ``rows``) on allowed classes, and the main disallowed class (-1).

    ``footprint`` holds the sites' shapely geometries in ``crs`` and
    ``is_point`` says which are point sites; both are indexed like the
    results, of which only ``rows`` are filled (the rest stay NaN / -1).

    Point sites: 1 or 0 by the class of the cell under the point (the
    cell below / right of it when the point is on a cell edge).  Parcels:
    the exact area of the parcel on each raster cell under its bounding box
    (cell polygon intersection), summed over allowed cells and divided by
    the parcel's whole area, so area off the raster or on nodata counts as
    not allowed.  The raster is read once under all sites, or in tiles of
    sites when that window is very large.
    """
    import geopandas as gpd
    from rasterio.errors import RasterioIOError
    from rasterio.windows import Window

    n = len(footprint)
    share = np.full(n, np.nan)
    worst = np.full(n, -1, dtype=np.int64)
    if not len(rows):
        return share, worst
    with open_raster(mask.raster, "land-use raster") as src:
        shapes = footprint[rows]
        if not as_crs(src.crs).equals(crs):
            notes.append(f"land-use raster: sites reprojected to its CRS {crs_label(src.crs)} to read cells")
            shapes = np.asarray(gpd.GeoSeries(shapes, crs=crs).to_crs(src.crs).array, dtype=object)
        inv = ~src.transform
        bounds = shapely.bounds(shapes)
        cx = bounds[:, [0, 2, 0, 2]]
        cy = bounds[:, [1, 1, 3, 3]]
        colf, rowf = _affine(inv, cx, cy)
        r0 = np.floor(rowf.min(axis=1)).astype(np.int64)
        r1 = np.floor(rowf.max(axis=1)).astype(np.int64)
        c0 = np.floor(colf.min(axis=1)).astype(np.int64)
        c1 = np.floor(colf.max(axis=1)).astype(np.int64)
        # cells of the window under all sites, clipped to the raster (sites far off it read nothing)
        span = max(min(int(r1.max()), src.height - 1) - max(int(r0.min()), 0) + 1, 0) * max(
            min(int(c1.max()), src.width - 1) - max(int(c0.min()), 0) + 1, 0
        )
        if span <= _MAX_WINDOW_CELLS:
            groups = [np.arange(len(rows))]
        else:
            tile = _TILE_CELLS
            key = (np.clip(r0, 0, None) // tile) * (src.width // tile + 1) + np.clip(c0, 0, None) // tile
            order = np.argsort(key, kind="stable")
            groups = np.split(order, np.flatnonzero(np.diff(key[order])) + 1)
        logger.debug("land-use raster: %d site(s) read in %d window(s)", len(rows), len(groups))
        point_all = is_point[rows]
        for group in groups:
            # the window under this group's sites, clipped to the raster
            wr0, wc0 = max(int(r0[group].min()), 0), max(int(c0[group].min()), 0)
            wr1 = min(int(r1[group].max()), src.height - 1)
            wc1 = min(int(c1[group].max()), src.width - 1)
            if wr1 < wr0 or wc1 < wc0:
                data = np.ma.masked_all((1, 1), dtype=np.int64)
                wr0 = wc0 = wr1 = wc1 = -(10**12)  # nothing is on the raster
            else:
                try:
                    data = src.read(1, window=Window(wc0, wr0, wc1 - wc0 + 1, wr1 - wr0 + 1), masked=True)
                except RasterioIOError as exc:  # a truncated file opens but cannot be read
                    raise LayerError(
                        f"land-use raster {mask.raster}: cannot read its cells ({exc}); the file looks truncated or "
                        "damaged: is it a complete GeoTIFF? Copy or export it again"
                    ) from None
            codes_all = np.asarray(np.ma.getdata(data))
            invalid_all = np.ma.getmaskarray(data)
            if np.issubdtype(codes_all.dtype, np.floating):
                invalid_all = invalid_all | ~np.isfinite(codes_all)

            def cell_values(r: np.ndarray, c: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
                """Class codes (-1 off the raster or nodata) and "allowed" flags."""
                on = (r >= wr0) & (r <= wr1) & (c >= wc0) & (c <= wc1)
                values = np.full(len(r), -1, dtype=np.int64)
                ok = np.zeros(len(r), dtype=bool)
                if on.any():
                    rr, cc = r[on] - wr0, c[on] - wc0
                    valid = ~invalid_all[rr, cc]
                    codes = np.where(valid, codes_all[rr, cc], -1).astype(np.int64)
                    values[on] = codes
                    ok[on] = valid & mask.allows(codes)
                return values, ok

            point = group[point_all[group]]
            if len(point):
                xy = shapely.get_coordinates(shapely.point_on_surface(shapes[point]))
                pc, pr = _affine(inv, xy[:, 0], xy[:, 1])
                values, ok = cell_values(np.floor(pr).astype(np.int64), np.floor(pc).astype(np.int64))
                share[rows[point]] = ok.astype(np.float64)
                worst[rows[point]] = np.where(ok, -1, values)
            poly = group[~point_all[group]]
            if len(poly):
                _parcel_shares(poly, shapes, r0, r1, c0, c1, src.transform, (src.height, src.width),
                               cell_values, rows, share, worst)
    return share, worst


def _parcel_shares(
    poly: np.ndarray, shapes: np.ndarray, r0: np.ndarray, r1: np.ndarray, c0: np.ndarray, c1: np.ndarray,
    transform: Any, shape: tuple[int, int], cell_values: Any, rows: np.ndarray, share: np.ndarray, worst: np.ndarray,
) -> None:
    """Exact area of each parcel on each raster cell under its bounding box, summed over allowed cells.

    Only cells on the raster are cut (area off the raster is never allowed,
    so a parcel far over the edge costs nothing extra); that area is the
    parcel's area less its area on the raster, and counts as class -1.
    """
    height, width_all = shape
    lo_r, hi_r = np.clip(r0[poly], 0, None), np.minimum(r1[poly], height - 1)
    lo_c, hi_c = np.clip(c0[poly], 0, None), np.minimum(c1[poly], width_all - 1)
    n_r, n_c = np.maximum(hi_r - lo_r + 1, 0), np.maximum(hi_c - lo_c + 1, 0)
    counts = n_r * n_c
    owner = np.repeat(poly, counts)
    start = np.repeat(np.cumsum(counts) - counts, counts)
    k = np.arange(len(owner)) - start
    width = np.repeat(n_c, counts)
    cell_r = np.repeat(lo_r, counts) + k // np.maximum(width, 1)
    cell_c = np.repeat(lo_c, counts) + k % np.maximum(width, 1)
    area = np.zeros(len(owner))
    chunk = 200_000
    for s in range(0, len(owner), chunk):
        sl = slice(s, s + chunk)
        cells = _cell_polygons(transform, cell_r[sl], cell_c[sl])
        area[sl] = shapely.area(shapely.intersection(shapes[owner[sl]], cells))
    values, ok = cell_values(cell_r, cell_c)
    whole = shapely.area(shapes[poly])
    good = np.bincount(owner, weights=np.where(ok, area, 0.0), minlength=len(rows))
    share[rows[poly]] = np.clip(good[poly] / whole, 0.0, 1.0)
    # the area off the raster, as one more disallowed piece of class -1 per parcel
    on_raster = np.bincount(owner, weights=area, minlength=len(rows))[poly]
    off = whole - on_raster
    over = off > 1e-9 * whole
    owner = np.concatenate([owner, poly[over]])
    values = np.concatenate([values, np.full(int(over.sum()), -1, dtype=values.dtype)])
    ok = np.concatenate([ok, np.zeros(int(over.sum()), dtype=bool)])
    area = np.concatenate([area, off[over]])
    # the disallowed class covering the most area, for the record
    bad = ~ok & (area > 0)
    if bad.any():
        keys = np.stack([owner[bad], values[bad]], axis=1)
        pairs, inverse = np.unique(keys, axis=0, return_inverse=True)
        sums = np.bincount(inverse.ravel(), weights=area[bad])
        order = np.lexsort((-sums, pairs[:, 0]))
        firsts = order[np.unique(pairs[order, 0], return_index=True)[1]]
        worst[rows[pairs[firsts, 0]]] = pairs[firsts, 1]
