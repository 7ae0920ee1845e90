"""Array core for population grids: one block of cells -> weighted points.

Nothing here opens a file.  The functions take a 2-D array of people per
cell (already cleaned of nodata and bad values), the affine transform of the
grid and where the block sits in it, and return plain numpy arrays.  The
reader in :mod:`geocover.demand` feeds them one window at a time, so a grid
larger than memory streams through.

Pixel coordinates follow rasterio: cell ``(row, col)`` covers pixel
coordinates ``col .. col+1`` and ``row .. row+1``, its centre is at
``(col + 0.5, row + 0.5)`` and the affine transform maps pixel ``(col, row)``
to ``(x, y)``.

>>> import numpy as np
>>> from affine import Affine
>>> counts = np.array([[0.0, 2.0], [1.0, 1.0]])
>>> pts = block_points(counts, Affine(100, 0, 0, 0, -100, 200), grid_width=2, factor=2)
>>> pts.weight.tolist(), pts.x.round(3).tolist(), pts.y.round(3).tolist(), pts.unit.tolist()
([4.0], [125.0], [100.0], [0])
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = [
    "BlockPoints",
    "block_sums",
    "block_points",
    "PointBuffer",
    "empty_small_pages",
    "apply_affine",
    "cell_centres",
    "block_corners",
    "farthest_corner",
    "half_diagonal",
    "ellipsoid_band_area",
    "geographic_row_areas",
    "clip_fractions",
]


@dataclass(frozen=True, eq=False)
class BlockPoints:
    """Populated blocks of one window.

    ``x``, ``y`` are the population-weighted centroids in the grid's own CRS,
    ``weight`` the people, ``unit`` the flat index (``row * grid_width +
    col``) of the block's top-left source cell, and ``row0``, ``col0`` that
    cell's row and column in the source grid.
    """

    x: np.ndarray
    y: np.ndarray
    weight: np.ndarray
    unit: np.ndarray
    row0: np.ndarray
    col0: np.ndarray

    def __len__(self) -> int:
        return len(self.weight)


def _pad_to(counts: np.ndarray, factor: int) -> np.ndarray:
    h, w = counts.shape
    ph, pw = (-h) % factor, (-w) % factor
    if ph or pw:
        counts = np.pad(counts, ((0, ph), (0, pw)))
    return counts


def block_sums(counts: np.ndarray, factor: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sum ``counts`` in ``factor`` x ``factor`` blocks, with first moments.

    Returns ``(s, si, sj)``, each of shape ``(ceil(h/f), ceil(w/f))``: the
    people per block, and the people-weighted sums of the local pixel row and
    column of cell centres (``i + 0.5``, ``j + 0.5`` with ``i, j`` in
    ``0 .. f-1``).  ``si / s`` and ``sj / s`` are the weighted centroid in
    pixel units from the block's top-left corner.  Edge blocks that the grid
    only partly fills are padded with zeros.

    >>> s, si, sj = block_sums(np.array([[1.0, 0.0, 3.0]]), 2)
    >>> s.tolist(), (si / s).tolist(), (sj / s).tolist()
    ([[1.0, 3.0]], [[0.5, 0.5]], [[0.5, 0.5]])
    """
    counts = np.asarray(counts, dtype=np.float64)
    if factor == 1:
        half = counts * 0.5  # every cell centre is half a pixel from its own corner
        return counts, half, half.copy()
    padded = _pad_to(counts, factor)
    hb, wb = padded.shape[0] // factor, padded.shape[1] // factor
    cube = padded.reshape(hb, factor, wb, factor)
    offsets = np.arange(factor, dtype=np.float64) + 0.5
    by_row = cube.sum(axis=3)  # (hb, f, wb): people per local row
    s = by_row.sum(axis=1)
    si = np.einsum("afb,f->ab", by_row, offsets)
    sj = (cube @ offsets).sum(axis=1)  # (hb, f, wb) -> (hb, wb)
    return s, si, sj


def block_points(
    counts: np.ndarray,
    transform: Any,
    *,
    grid_width: int,
    row_off: int = 0,
    col_off: int = 0,
    factor: int = 1,
) -> BlockPoints:
    """The populated cells (or ``factor`` x ``factor`` blocks) of one window as points.

    Parameters
    ----------
    counts : (h, w) array
        People per cell, zero where nobody lives; no nodata, no negatives.
    transform : affine.Affine
        The transform of the whole grid (not of the window).
    grid_width : int
        Number of columns of the whole grid, for the flat cell index.
    row_off, col_off : int
        Where ``counts[0, 0]`` sits in the whole grid; multiples of
        ``factor`` so that blocks line up across windows.
    factor : int
        Coarsening factor; 1 keeps every cell.

    Returns
    -------
    BlockPoints
        One point per block holding people, at the people-weighted centroid
        of its cells' centres.
    """
    counts = np.asarray(counts)
    a, b, c, d, e, f = transform.a, transform.b, transform.c, transform.d, transform.e, transform.f
    h, w = counts.shape
    if factor == 1:
        flat = np.flatnonzero(counts > 0)
        weight = counts.reshape(-1)[flat].astype(np.float64, copy=False)
        row0, col0 = np.divmod(flat, w)
        if row_off:
            row0 += row_off
        if col_off:
            col0 += col_off
        if w == grid_width and col_off == 0:
            unit = flat
            if row_off:
                unit += row_off * grid_width
        else:
            unit = row0 * int(grid_width) + col0
        pr = row0 + 0.5
        pc = col0 + 0.5
    else:
        s, si, sj = block_sums(counts, factor)
        flat = np.flatnonzero(s > 0)
        br, bc = np.divmod(flat, s.shape[1])
        weight = s.reshape(-1)[flat]
        row0 = br * factor + row_off
        col0 = bc * factor + col_off
        pr = row0 + si.reshape(-1)[flat] / weight
        pc = col0 + sj.reshape(-1)[flat] / weight
        unit = row0 * int(grid_width) + col0
    x = pc * a
    x += c
    y = pr * e
    y += f
    if b:
        x += b * pr
    if d:
        y += d * pc
    del pr, pc
    return BlockPoints(x, y, weight, unit.astype(np.int64, copy=False), row0, col0)


def apply_affine(transform: Any, cols: Any, rows: Any) -> tuple[Any, Any]:
    """``(x, y)`` of pixel coordinates ``(cols, rows)`` (arrays or scalars) under an affine transform."""
    a, b, c, d, e, f = transform.a, transform.b, transform.c, transform.d, transform.e, transform.f
    return c + a * cols + b * rows, f + d * cols + e * rows


def cell_centres(unit: np.ndarray, transform: Any, grid_width: int, out: np.ndarray | None = None) -> np.ndarray:
    """Centres ``(n, 2)`` of the cells with flat indices ``unit`` (``row * grid_width + col``).

    Written into ``out`` when given, in slices, so that no full-size temporaries are made.

    >>> from affine import Affine
    >>> cell_centres(np.array([0, 5]), Affine(10, 0, 0, 0, -10, 100), 3).tolist()
    [[5.0, 95.0], [25.0, 85.0]]
    """
    unit = np.asarray(unit)
    n = len(unit)
    if out is None:
        out = np.empty((n, 2), dtype=np.float64)
    a, b, c, d, e, f = transform.a, transform.b, transform.c, transform.d, transform.e, transform.f
    step = 1 << 20
    for start in range(0, n, step):
        rows, cols = np.divmod(unit[start : start + step], grid_width)
        pr = rows + 0.5
        pc = cols + 0.5
        del rows, cols
        x = out[start : start + step, 0]
        y = out[start : start + step, 1]
        np.multiply(pc, a, out=x)
        x += c
        np.multiply(pr, e, out=y)
        y += f
        if b:
            x += b * pr
        if d:
            y += d * pc
    return out


def block_corners(
    transform: Any,
    row0: np.ndarray,
    col0: np.ndarray,
    factor: int,
    grid_shape: tuple[int, int] | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """The four corners of each ``factor`` x ``factor`` block, shape (4, n) each for x and y.

    With ``grid_shape`` (rows, cols) a block at the grid's right or bottom
    edge is cut at the edge: its far corners are those of the cells it holds,
    not of the padding beyond the grid.

    >>> from affine import Affine
    >>> block_corners(Affine(1, 0, 0, 0, -1, 0), np.array([0]), np.array([0]), 4, grid_shape=(3, 2))[0].ravel().tolist()
    [0.0, 2.0, 0.0, 2.0]
    """
    row1 = row0 + factor
    col1 = col0 + factor
    if grid_shape is not None:
        row1 = np.minimum(row1, grid_shape[0])
        col1 = np.minimum(col1, grid_shape[1])
    rows = np.stack([row0, row0, row1, row1]).astype(np.float64)
    cols = np.stack([col0, col1, col0, col1]).astype(np.float64)
    return apply_affine(transform, cols, rows)


def farthest_corner(x: np.ndarray, y: np.ndarray, cx: np.ndarray, cy: np.ndarray) -> np.ndarray:
    """Distance from each point to the farthest of its block's corners.

    For a block whose point sits at its centre this is half the block
    diagonal; for a weighted centroid off the centre it is larger, and it is
    always an upper bound on the distance from the point to anyone in the
    (convex) block.

    >>> farthest_corner(np.array([1.0]), np.array([1.0]), np.array([[0.0], [2.0], [0.0], [2.0]]),
    ...                 np.array([[0.0], [0.0], [2.0], [2.0]])).round(6).tolist()
    [1.414214]
    """
    return np.sqrt(((cx - x) ** 2 + (cy - y) ** 2).max(axis=0))


def half_diagonal(transform: Any, factor: int = 1) -> float:
    """Half the longer diagonal of a ``factor`` x ``factor`` block, in CRS units."""
    a, b, d, e = transform.a, transform.b, transform.d, transform.e
    d1 = math.hypot(a + b, d + e)
    d2 = math.hypot(a - b, d - e)
    return 0.5 * factor * max(d1, d2)


#: cells per chunk in :meth:`PointBuffer.stage_rows` (temporaries of about 1 MB)
STAGE_CELLS = 1 << 17


def _hugepage_switch() -> Any:
    try:  # numpy >= 2; private, so looked up with care and skipped when missing
        from numpy._core.multiarray import _set_madvise_hugepage
    except ImportError:
        try:
            from numpy.core.multiarray import _set_madvise_hugepage  # numpy 1.x
        except ImportError:
            return None
    return _set_madvise_hugepage


_SET_HUGEPAGE = _hugepage_switch()
_HUGEPAGE_LOCK = threading.Lock()  # two threads switching at once could leave it off for good


def empty_small_pages(shape: Any, dtype: Any) -> np.ndarray:
    """``np.empty(shape, dtype)`` without numpy's request for transparent huge pages.

    On Linux numpy asks (``madvise(MADV_HUGEPAGE)``) for 2 MB pages for
    every array of 4 MB or more.  For memory that is written once, front to
    back, as the output of a grid read is, that buys little, and on virtual
    machines that hand freed 2 MB blocks back to the host (free page
    reporting) the first touch of each huge page can cost milliseconds:
    measured on the development VM, a fresh process first-touching 840 MB
    took 0.2-1.9 s with huge pages and a steady 0.33 s with 4 KB pages.  The
    switch is numpy's own (process-wide, set back at once, under a lock);
    where it is missing this is plain ``np.empty``.

    >>> empty_small_pages((2, 3), np.float64).shape
    (2, 3)
    """
    if _SET_HUGEPAGE is None:
        return np.empty(shape, dtype=dtype)
    with _HUGEPAGE_LOCK:
        before = _SET_HUGEPAGE(False)
        try:
            return np.empty(shape, dtype=dtype)
        finally:
            _SET_HUGEPAGE(before)


class PointBuffer:
    """Output arrays for demand points that grow in place while windows stream in.

    ``numpy.ndarray.resize`` reallocates, which for large blocks moves page
    tables rather than copying (``mremap`` on Linux), so growing does not
    hold two copies; :meth:`finish` trims to the points made.  Capacity
    starts at ``capacity`` (untouched memory costs nothing) and grows by half.

    >>> buf = PointBuffer(1)
    >>> buf.add_points(np.array([1.0, 2.0]), np.array([3.0, 4.0]), np.array([5.0, 6.0]), np.array([7, 8]), 0.5)
    >>> xy, w, u, fp = buf.finish()
    >>> xy.tolist(), w.tolist(), u.tolist(), fp.tolist()
    ([[1.0, 3.0], [2.0, 4.0]], [5.0, 6.0], [7, 8], [0.5, 0.5])

    One footprint for all is kept as one value until a point differs:

    >>> buf = PointBuffer(4)
    >>> buf.add_points(np.zeros(2), np.zeros(2), np.ones(2), np.arange(2), 0.5)
    >>> buf.uniform_footprint
    0.5
    >>> buf.add_points(np.zeros(2), np.zeros(2), np.ones(2), np.arange(2), np.array([1.0, 2.0]))
    >>> buf.uniform_footprint is None, buf.finish()[3].tolist()
    (True, [0.5, 0.5, 1.0, 2.0])
    """

    def __init__(self, capacity: int = 1024) -> None:
        capacity = max(int(capacity), 1)
        self.n = 0
        # written once, front to back: small pages (see empty_small_pages)
        self.xy = empty_small_pages((capacity, 2), np.float64)
        self.weight = empty_small_pages(capacity, np.float64)
        self.unit = empty_small_pages(capacity, np.int64)
        self.footprint = empty_small_pages(capacity, np.float64)
        # while every point added has the same footprint it is kept here, not written per point
        self.uniform_footprint: float | None = None

    @property
    def capacity(self) -> int:
        return len(self.weight)

    def reserve(self, extra: int, expect: int | None = None) -> None:
        """Make room for ``extra`` more points; ``expect`` is a guess of the final count, if any."""
        need = self.n + int(extra)
        if need <= self.capacity:
            return
        cap = max(need, int(expect) if expect else self.capacity + self.capacity // 2)
        if self.n == 0:  # nothing to keep: fresh, untouched memory
            self.__init__(cap)  # type: ignore[misc]
            return
        # resize zero-fills the new part (numpy) but keeps one copy of the old part
        self.xy.resize((cap, 2), refcheck=False)
        for arr in (self.weight, self.unit, self.footprint):
            arr.resize(cap, refcheck=False)

    def add_cells(self, flat: np.ndarray, offset: int, weight: np.ndarray, transform: Any, grid_width: int, footprint: float) -> None:
        """Add whole cells by flat index (``flat + offset`` in the grid), their centres computed in place."""
        k = len(flat)
        self.reserve(k)
        lo, hi = self.n, self.n + k
        unit = self.unit[lo:hi]
        np.add(flat, offset, out=unit, casting="unsafe")
        cell_centres(unit, transform, grid_width, out=self.xy[lo:hi])
        self.weight[lo:hi] = weight
        self._set_footprint(lo, hi, footprint)
        self.n = hi
        del unit

    def stage_rows(self, mask: np.ndarray, values: np.ndarray, row_off: int, transform: Any, staged: np.ndarray) -> int:
        """Write the cells of a strip of whole grid rows where ``mask`` holds, past the points added; return how many.

        ``mask`` and ``values`` are ``(h, grid width)`` arrays for grid rows
        ``row_off .. row_off + h - 1``.  Each masked cell's flat index and
        centre go into the unit and coordinate arrays after the last point
        added, and its value into ``staged[:k]`` (contiguous, the dtype of
        ``values``); nothing counts as added until :meth:`commit`, so a
        caller that finds the strip unusable can drop it.  The work goes in
        chunks of about ``STAGE_CELLS`` cells, so every temporary is small and
        comes back from the allocator already touched: a strip-sized
        temporary would be fresh memory, and first-touching memory costs more
        than the arithmetic.  For a north-up grid the centres come from one
        row table and one column table (the same arithmetic as
        :func:`cell_centres`, so the same coordinates to the bit) instead of a
        division per cell.

        >>> from affine import Affine
        >>> t = Affine(10, 0, 0, 0, -10, 100)
        >>> buf, staged = PointBuffer(1), np.empty(6)
        >>> mask = np.array([[False, True, False], [True, False, False]])
        >>> buf.stage_rows(mask, np.array([[0.0, 2.0, 0.0], [4.0, 0.0, 0.0]]), 1, t, staged)
        2
        >>> buf.commit(2, staged, 7.0)
        >>> xy, w, u, fp = buf.finish()
        >>> xy.tolist(), w.tolist(), u.tolist(), xy.tolist() == cell_centres(u, t, 3).tolist()
        ([[15.0, 85.0], [5.0, 75.0]], [2.0, 4.0], [4, 6], True)
        """
        h, w = mask.shape
        a, b, c, d, e, f = transform.a, transform.b, transform.c, transform.d, transform.e, transform.f
        self.reserve(int(np.count_nonzero(mask)))  # before anything is written: growing from empty starts afresh
        north_up = not (b or d)
        if north_up:
            x_col = np.arange(w) + 0.5
            x_col *= a
            x_col += c
        step = max(1, STAGE_CELLS // max(w, 1))
        k = 0
        for r0 in range(0, h, step):
            r1 = min(h, r0 + step)
            idx = np.flatnonzero(mask[r0:r1])
            kc = len(idx)
            if kc == 0:
                continue
            lo, hi = self.n + k, self.n + k + kc
            np.take(values[r0:r1].reshape(-1), idx, out=staged[k : k + kc])
            unit = self.unit[lo:hi]
            np.add(idx, (row_off + r0) * w, out=unit, casting="unsafe")
            if north_up:
                starts = np.arange(r1 - r0 + 1, dtype=np.int64) * w
                per_row = np.diff(np.searchsorted(idx, starts))
                y_row = np.arange(row_off + r0, row_off + r1) + 0.5
                y_row *= e
                y_row += f
                self.xy[lo:hi, 1] = np.repeat(y_row, per_row)
                idx -= np.repeat(starts[:-1], per_row)  # now the column of each cell
                self.xy[lo:hi, 0] = x_col[idx]
            else:
                cell_centres(unit, transform, w, out=self.xy[lo:hi])
            k += kc
            del idx, unit
        return k

    def commit(self, k: int, weight: np.ndarray, footprint: Any) -> None:
        """Add the ``k`` points staged by :meth:`stage_rows`, with weights ``weight[:k]`` and their footprint."""
        lo, hi = self.n, self.n + int(k)
        self.weight[lo:hi] = weight[:k]
        self._set_footprint(lo, hi, footprint)
        self.n = hi

    def add_points(self, x: np.ndarray, y: np.ndarray, weight: np.ndarray, unit: np.ndarray, footprint: Any) -> None:
        """Add points with their coordinates, weights, units and footprints (array or one value)."""
        k = len(weight)
        self.reserve(k)
        lo, hi = self.n, self.n + k
        self.xy[lo:hi, 0] = x
        self.xy[lo:hi, 1] = y
        self.weight[lo:hi] = weight
        self.unit[lo:hi] = unit
        self._set_footprint(lo, hi, footprint)
        self.n = hi

    def _set_footprint(self, lo: int, hi: int, footprint: Any) -> None:
        if np.ndim(footprint) == 0:
            value = float(footprint)
            if lo == 0:
                self.uniform_footprint = value
                return
            if self.uniform_footprint is not None and (value == self.uniform_footprint):
                return
        if self.uniform_footprint is not None:  # no longer one value for all: write the earlier points' value
            self.footprint[:lo] = self.uniform_footprint
            self.uniform_footprint = None
        self.footprint[lo:hi] = footprint

    def finish(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """The arrays trimmed to the points added (the buffer is not usable afterwards).

        When every point got the same footprint, the footprint is a read-only
        broadcast of that value (no memory per point); ``uniform_footprint``
        then holds it.
        """
        n = self.n
        self.xy.resize((n, 2), refcheck=False)
        for arr in (self.weight, self.unit):
            arr.resize(n, refcheck=False)
        if self.uniform_footprint is not None:
            footprint = np.broadcast_to(np.float64(self.uniform_footprint), (n,))
        else:
            self.footprint.resize(n, refcheck=False)
            footprint = self.footprint
        out = (self.xy, self.weight, self.unit, footprint)
        del self.xy, self.weight, self.unit, self.footprint
        return out


# --------------------------------------------------------------------------- ellipsoidal areas


def _authalic_q(sin_phi: np.ndarray, e: float) -> np.ndarray:
    """The authalic-latitude function q(phi) for an ellipsoid of eccentricity ``e``."""
    if e == 0.0:
        return 2.0 * sin_phi
    es = e * sin_phi
    return (1.0 - e * e) * (sin_phi / (1.0 - es * es) - np.log((1.0 - es) / (1.0 + es)) / (2.0 * e))


def ellipsoid_band_area(lat1: Any, lat2: Any, dlon_deg: Any, a: float = 6378137.0, f: float = 1 / 298.257223563) -> np.ndarray:
    """Area in m2 of the ellipsoidal quadrangle between two parallels, ``dlon_deg`` wide.

    Closed form: the area between the equator and latitude phi per radian
    of longitude is ``a**2 * q(phi) / 2`` with
    ``q = (1 - e2) * (sin(phi) / (1 - e2 sin2(phi)) - ln((1 - e sin phi) / (1 + e sin phi)) / (2 e))``
    (the authalic-latitude function, Snyder, *Map Projections: A Working
    Manual*, USGS PP 1395, eq. 3-12).  Defaults are WGS 84.

    >>> round(float(ellipsoid_band_area(0.0, 1.0, 1.0)) / 1e6)  # km2, from memory about 12,308
    12308
    """
    e = math.sqrt(f * (2.0 - f))
    p1 = np.radians(np.asarray(lat1, dtype=np.float64))
    p2 = np.radians(np.asarray(lat2, dtype=np.float64))
    q1 = _authalic_q(np.sin(p1), e)
    q2 = _authalic_q(np.sin(p2), e)
    return np.abs(0.5 * a * a * (q2 - q1) * np.radians(np.asarray(dlon_deg, dtype=np.float64)))


def geographic_row_areas(transform: Any, rows: np.ndarray, a: float, f: float) -> np.ndarray:
    """Area in m2 of one cell of each grid row of a north-up lon/lat grid (all cells of a row are equal)."""
    rows = np.asarray(rows, dtype=np.float64)
    lat_top = transform.f + transform.e * rows
    lat_bottom = lat_top + transform.e
    return ellipsoid_band_area(np.clip(lat_top, -90, 90), np.clip(lat_bottom, -90, 90), abs(transform.a), a, f)


# --------------------------------------------------------------------------- clipping


def _dilate(mask: np.ndarray) -> np.ndarray:
    out = mask.copy()
    out[1:, :] |= mask[:-1, :]
    out[:-1, :] |= mask[1:, :]
    grown = out.copy()
    grown[:, 1:] |= out[:, :-1]
    grown[:, :-1] |= out[:, 1:]
    return grown


def clip_fractions(geometry: Any, transform: Any, shape: tuple[int, int], *, fraction: bool) -> np.ndarray:
    """Share of each cell of a window that counts as inside ``geometry``.

    Parameters
    ----------
    geometry : shapely geometry
        The study area, in the grid's CRS.
    transform : affine.Affine
        The transform of the window (its top-left cell at pixel 0, 0).
    shape : (rows, cols)
    fraction : bool
        False: 1 for cells whose centre lies inside, else 0.  True: the
        area share of each cell inside the geometry, computed exactly with
        shapely for the cells along the boundary (and their neighbours) and
        by the centre test elsewhere, where it is exact.

    Returns
    -------
    (rows, cols) float64 array of values in [0, 1].
    """
    import shapely
    from rasterio import features

    rows, cols = shape
    if geometry is None or geometry.is_empty or rows == 0 or cols == 0:
        return np.zeros(shape, dtype=np.float64)
    inside = features.geometry_mask([geometry], out_shape=shape, transform=transform, invert=True, all_touched=False)
    share = inside.astype(np.float64)
    if not fraction:
        return share
    edge = features.geometry_mask(
        [geometry.boundary], out_shape=shape, transform=transform, invert=True, all_touched=True
    )
    edge = _dilate(edge)
    r, c = np.nonzero(edge)
    if len(r) == 0:
        return share
    c = c.astype(np.float64)
    r = r.astype(np.float64)
    x0, y0 = apply_affine(transform, c, r)
    x1, y1 = apply_affine(transform, c + 1.0, r)
    x2, y2 = apply_affine(transform, c + 1.0, r + 1.0)
    x3, y3 = apply_affine(transform, c, r + 1.0)
    ring = np.stack([np.stack([x0, x1, x2, x3, x0], axis=1), np.stack([y0, y1, y2, y3, y0], axis=1)], axis=2)
    cells = shapely.polygons(ring)
    shapely.prepare(geometry)
    cell_area = abs(transform.a * transform.e - transform.b * transform.d)
    part = shapely.area(shapely.intersection(cells, geometry)) / cell_area
    share[r.astype(np.int64), c.astype(np.int64)] = np.clip(part, 0.0, 1.0)
    return share
