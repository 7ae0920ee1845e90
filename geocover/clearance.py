"""Clearance of sites from exclusion zones: which sites are too close, and how far each is from the nearest zone.

Core of the exclusion rule of :func:`geocover.sites.screen_sites`: arrays of
shapely geometries in, arrays out; no files, no printing.

Two answers per site and zone layer, both exact:

* **verdict**: is the site's footprint closer than the setback to a zone
  (with no setback: does it intersect one), and if so, which zone is nearest
  (ties to the lowest feature id) and how far;
* **nearest distance** (``nearest_exclusion_m``) of the other sites: the
  least distance to any zone.

Point sites (the common case, and the benchmark's) go through a grid of the
zones, in numpy:

1. each zone is binned by the centre ``c`` of its envelope into square cells
   of side ``g``; with ``R`` the largest distance from ``c`` to a vertex, the
   zone is at least ``|p - c| - R`` from a point ``p``.  ``g`` is about one
   zone per cell and at least ``R_max`` plus the setback, so every zone
   closer than the setback to a point is in the 3 x 3 cells around it;
2. a site's candidates are the zones in those cells.  Those whose bound is
   below the setback are measured exactly: the distance to the zone's
   segments is GEOS's point-to-segment formula, operation for operation (so
   it is the value ``shapely.distance`` gives, bit for bit), and whether a
   polygon covers the point is told by counting ray crossings when the point
   is farther than a hair (1e-6 m, more for huge coordinates) from its
   boundary -- rounding cannot flip a crossing there -- and by GEOS's
   ``intersects_xy`` when it is nearer.  A covered point is at distance 0,
   as GEOS has it;
3. a site with no zone within the setback takes the candidate with the least
   bound, measures it (an upper bound ``u``), then measures the candidates
   whose bound does not exceed ``u``.  A zone outside the 3 x 3 cells has
   its centre at least ``e`` away (``e`` the distance from the site to the
   edge of those cells), so when ``e - R_max > u`` the least is the answer;
   the few sites it does not settle look at the 5 x 5, 7 x 7 and 9 x 9 cells
   the same way.

Zones the grid leaves out (much bigger than the typical zone, with more than
64 vertices and breaks, or collections), parcels and multipoint sites, and the rare
sites the grid does not settle, take the GEOS path: verdicts from an STRtree
``dwithin`` query and exact ``shapely.distance`` on its pairs; nearest
distances from an upper bound (``u``, or the nearest vertex of a subsample
of the zones' vertices by KD-tree), the zones whose envelope is within that
bound of the site (one STRtree query), and the least exact distance.

Work runs in chunks of sites, in a thread pool when one is given (GEOS and
large numpy operations release the GIL); the results do not depend on the
chunking or the number of threads.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from concurrent.futures import Executor
from dataclasses import dataclass
from typing import Any, TypeVar

import numpy as np
import shapely

__all__: list[str] = []  # internal to geocover.sites

_CHUNK = 4096  # sites per task: small arrays stay in cache, and there are tasks for every thread
_SEGMENTS = 1 << 16  # segment distances evaluated per numpy batch
# sites per task on the zone grid: sorted by cell they stay local, and numpy holds the GIL between
# operations, so bigger operations let threads run side by side (measured on the benchmark: two
# threads 1.1x one with 4,096 sites per task, 1.3-1.7x with 12,500-25,000; 16,384 was best whole)
_GRID_CHUNK = 16384
_WIDTH = 64  # zones with more vertices (pieces' breaks included) take the GEOS path
_BLOCK = 1 << 16  # vertices per block when the grid is built
_MARGIN_REL, _MARGIN_ABS = 1e-9, 1e-6  # slack on bounds for rounding (metres)

T = TypeVar("T")

#: ``screen_zones(grid=...)`` when the caller built no zone grid (one is built if it pays)
NO_GRID: Any = object()


def in_chunks(fn: Callable[[slice], T], n: int, pool: Executor | None, chunk: int | None = None) -> list[T]:
    """``fn`` on consecutive slices of ``range(n)``, in order; in ``pool`` when given."""
    return Chunks(fn, n, pool, chunk).results()


class Chunks:
    """``fn`` on consecutive slices of ``range(n)``, started in ``pool`` (if any) now, results in order later."""

    def __init__(self, fn: Callable[[slice], T], n: int, pool: Executor | None, chunk: int | None = None) -> None:
        chunk = chunk or _CHUNK
        self.fn = fn
        self.parts = [slice(a, min(a + chunk, n)) for a in range(0, n, chunk)]
        threaded = pool is not None and len(self.parts) > 1
        self.futures = [pool.submit(fn, part) for part in self.parts] if threaded else None  # type: ignore[union-attr]

    def results(self) -> list[Any]:
        if self.futures is None:
            return [self.fn(part) for part in self.parts]
        # the caller does the parts no thread has started: it would wait anyway, and a caller that is itself
        # a task of the pool never waits for a part that no thread is free to start
        return [self.fn(part) if f.cancel() else f.result() for part, f in zip(self.parts, self.futures)]


def _slack(bound: np.ndarray) -> np.ndarray:
    return bound * (1 + _MARGIN_REL) + _MARGIN_ABS


@dataclass
class Hits:
    """Per-site result of one exclusion layer."""

    hit: np.ndarray  # bool
    feature: np.ndarray  # int64 feature id of the nearest rejecting feature, -1
    nearest: np.ndarray  # float distance to the nearest feature of the layer


def screen_zones(
    footprints: np.ndarray,
    xy: np.ndarray,
    rows: np.ndarray,
    geoms: np.ndarray,
    ids: np.ndarray,
    setback: float,
    nearest: bool = True,
    pool: Executor | None = None,
    grid: Any = NO_GRID,
    single: np.ndarray | None = None,
) -> Hits:
    """Which footprints (at ``rows``) are closer than ``setback`` to a zone, and their nearest-zone distance.

    A site is rejected when the exact distance from its footprint to a zone
    is below the setback (with no setback: when it intersects a zone); the
    rejecting feature is the nearest such zone, ties to the lowest feature
    id, and the site's nearest distance is that zone's.  The nearest
    distance of the other sites is the least over all zones.  See the module
    notes for how.  ``single``: which footprints are single points, when the
    caller knows already.
    """
    n = len(footprints)
    hit = np.zeros(n, dtype=bool)
    feature = np.full(n, -1, dtype=np.int64)
    near = np.full(n, np.inf)
    if not len(geoms) or not len(rows):
        return Hits(hit, feature, near)
    on_grid = (shapely.get_type_id(footprints[rows]) == 0) if single is None else single[rows]
    if grid is NO_GRID:  # not built by the caller (who may pass None: a grid would not pay)
        grid = ZoneGrid.build(geoms, setback) if on_grid.any() else None
    if grid is None:
        on_grid[:] = False
    trees: dict[str, Any] = {}

    def tree() -> Any:
        if "all" not in trees:
            trees["all"] = shapely.STRtree(geoms)
        return trees["all"]

    found: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []  # (row position, zone, exact distance) below the setback
    gridded = np.flatnonzero(on_grid)
    upper = settled = np.zeros(0)
    if grid is not None:
        # the sites in cell order: neighbouring sites read the same zones, so the gathers stay in cache
        gxy = xy[rows[gridded]]
        order = np.argsort(grid.cell_of(gxy))  # any order of a cell's sites will do
        gridded = gridded[order]
        gx, gy = gxy[order, 0], gxy[order, 1]

        def on(part: slice) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
            site, zone, dist, up, done = grid.screen(gx[part], gy[part], setback, nearest)
            return site + part.start, zone, dist, up, done

        parts = in_chunks(on, len(gridded), pool, _GRID_CHUNK)
        found.append((gridded[np.concatenate([p[0] for p in parts])], np.concatenate([p[1] for p in parts]),
                      np.concatenate([p[2] for p in parts])))
        upper = np.concatenate([p[3] for p in parts])
        settled = np.concatenate([p[4] for p in parts])
        if len(grid.other):  # the zones the grid leaves out, by GEOS
            others = geoms[grid.other]
            trees["other"] = shapely.STRtree(others)
            site, zone, dist = _close_pairs(trees["other"], others, footprints[rows[gridded]], setback, pool)
            found.append((gridded[site], grid.other[zone], dist))
    rest_rows = np.flatnonzero(~on_grid)
    if len(rest_rows):
        site, zone, dist = _close_pairs(tree(), geoms, footprints[rows[rest_rows]], setback, pool)
        found.append((rest_rows[site], zone, dist))
    at = np.concatenate([f[0] for f in found])
    zone = np.concatenate([f[1] for f in found])
    dist = np.concatenate([f[2] for f in found])
    if len(at):
        # the nearest rejecting feature per site, ties to the lowest feature id
        least = _group_min(at, dist, len(rows))
        tie = dist == least[at]
        lowest = np.full(len(rows), np.iinfo(np.int64).max)
        np.minimum.at(lowest, at[tie], ids[zone[tie]])
        pos = np.flatnonzero(lowest < np.iinfo(np.int64).max)
        site = rows[pos]
        hit[site] = True
        feature[site] = lowest[pos]
        near[site] = least[pos]
    if not nearest:
        return Hits(hit, feature, near)
    # the others are outside every zone: their nearest distance
    free = ~hit[rows]
    if grid is not None:
        done = free[gridded] & settled
        value = upper[done]
        if len(grid.other) and done.any():
            others = geoms[grid.other]
            pick = rows[gridded[done]]
            value = np.minimum(value, _by_envelope(trees["other"], others, footprints[pick], xy[pick], value, pool))
        near[rows[gridded[done]]] = value
        todo = free[gridded] & ~settled
        pick = rows[gridded[todo]]
        if len(pick):
            near[pick] = _by_envelope(tree(), geoms, footprints[pick], xy[pick], upper[todo], pool)
    pick = rows[rest_rows[free[rest_rows]]]
    if len(pick):
        near[pick] = _by_envelope(tree(), geoms, footprints[pick], xy[pick], np.full(len(pick), np.inf), pool)
    return Hits(hit, feature, near)


# --------------------------------------------------------------------------- the GEOS path


def _close_pairs(
    tree: Any, geoms: np.ndarray, query: np.ndarray, setback: float, pool: Executor | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(query index, zone index, exact GEOS distance) of the pairs closer than ``setback`` (intersecting for 0).

    One STRtree query (``dwithin`` the setback, widened by a hair because
    GEOS's test is inclusive and rounded, or ``intersects``), then the exact
    distance on the pairs found.
    """

    def part_pairs(part: slice) -> tuple[np.ndarray, np.ndarray]:
        if setback > 0:
            pairs = tree.query(query[part], predicate="dwithin", distance=_slack(np.float64(setback)))
            pairs[0] += part.start
            dist = shapely.distance(query[pairs[0]], geoms[pairs[1]])
            keep = dist < setback
            return pairs[:, keep], dist[keep]
        pairs = tree.query(query[part], predicate="intersects")
        pairs[0] += part.start
        return pairs, np.zeros(pairs.shape[1])

    found = in_chunks(part_pairs, len(query), pool)
    pairs = np.concatenate([p for p, _ in found], axis=1) if found else np.zeros((2, 0), dtype=np.int64)
    dist = np.concatenate([d for _, d in found]) if found else np.zeros(0)
    return pairs[0], pairs[1], dist


def _by_envelope(
    tree: Any, geoms: np.ndarray, query: np.ndarray, xy: np.ndarray, upper: np.ndarray, pool: Executor | None
) -> np.ndarray:
    """Least exact GEOS distance over the zones whose envelope is within a bound of each footprint.

    ``upper`` bounds each footprint's distance from above where finite; where
    it is infinite the nearest vertex of a subsample of the zones' vertices
    (a KD-tree query) is taken instead.  Sites with no zone within a finite
    bound get ``inf``.
    """
    upper = upper.copy()
    missing = ~np.isfinite(upper)
    if missing.any():
        from scipy.spatial import cKDTree

        vertices = shapely.get_coordinates(geoms)
        step = max(1, len(vertices) // (4 * len(geoms)))  # about four vertices per zone is a tight enough bound
        kd = cKDTree(vertices[::step], balanced_tree=False, compact_nodes=False)
        upper[missing] = kd.query(xy[missing], workers=1 if pool is None else -1)[0]
    reach = _slack(upper)
    bounds = shapely.bounds(query)

    def part_min(part: slice) -> np.ndarray:
        r = reach[part]
        grown = bounds[part] + np.stack([-r, -r, r, r], axis=1)
        pairs = tree.query(shapely.box(grown[:, 0], grown[:, 1], grown[:, 2], grown[:, 3]))
        dist = shapely.distance(query[part][pairs[0]], geoms[pairs[1]])
        return _group_min(pairs[0], dist, part.stop - part.start)

    return np.concatenate(in_chunks(part_min, len(query), pool)) if len(query) else np.zeros(0)


def _group_min(index: np.ndarray, values: np.ndarray, n: int) -> np.ndarray:
    """Least of ``values`` per ``index`` in ``0..n-1`` (inf where there is none)."""
    out = np.full(n, np.inf)
    np.minimum.at(out, index, values)  # unbuffered, in C since numpy 1.25: faster than sorting by index
    return out


def _ranges(starts: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """The concatenation of ``range(s, s + c)`` for each pair."""
    total = int(counts.sum())
    offsets = np.cumsum(counts) - counts
    out = np.repeat(starts - offsets, counts)
    out += np.arange(total)
    return out


def _run_distance(px: np.ndarray, py: np.ndarray, vx: np.ndarray, vy: np.ndarray) -> np.ndarray:
    """Distance from points ``(n, 1)`` to the segments between consecutive vertices ``(n, k)``, as GEOS has it.

    GEOS's ``Distance::pointToSegment(p, a, b)``: with ``r = ((p - a) . (b -
    a)) / |b - a|^2``, the distance to ``a`` when ``r <= 0`` (or ``a == b``),
    to ``b`` when ``r >= 1``, else ``|s| |b - a|`` with ``s = ((a.y - p.y)(b.x
    - a.x) - (a.x - p.x)(b.y - a.y)) / |b - a|^2``; a point's distance is
    ``sqrt(dx*dx + dy*dy)``.  The same operations in the same order give the
    same values, bit for bit (tested against ``shapely.distance``), with two
    savings: the distance to a vertex is worked out once for the two segments
    it ends, and the numerator of ``s`` is taken as ``(p.x - a.x)(b.y - a.y)
    - (p.y - a.y)(b.x - a.x)``, its exact negative (negating is exact in
    floating point), which only enters through its absolute value.  NaN
    vertices give NaN segments.
    """
    dx, dy = px - vx, py - vy
    dv = np.sqrt(dx * dx + dy * dy)
    pax, pay = dx[:, :-1], dy[:, :-1]
    bax, bay = vx[:, 1:] - vx[:, :-1], vy[:, 1:] - vy[:, :-1]
    len2 = bax * bax + bay * bay
    r = (pax * bax + pay * bay) / len2
    out = np.abs((pax * bay - pay * bax) / len2) * np.sqrt(len2)
    out = np.where(r >= 1.0, dv[:, 1:], out)
    return np.where((r <= 0.0) | (len2 == 0.0), dv[:, :-1], out)


_SIMPLE = (1, 2)  # LineString, LinearRing: one run of segments
_MULTI = (4, 5, 6, 7)  # MultiPoint, MultiLineString, MultiPolygon, GeometryCollection


def _split(geoms: np.ndarray, mask: np.ndarray, parts: Callable[..., Any]) -> np.ndarray:
    """``geoms`` with each masked one replaced, in place and in order, by its parts."""
    pieces, index = parts(geoms[mask], return_index=True)
    position = np.concatenate([np.flatnonzero(~mask), np.flatnonzero(mask)[index]])
    order = np.argsort(position, kind="stable")  # parts of one geometry keep their order
    return np.concatenate([geoms[~mask], pieces])[order]


def _pieces(geoms: np.ndarray) -> np.ndarray | None:
    """Points, lines and rings of ``geoms``, in the order of their coordinates (None for what we cannot split)."""
    for _ in range(8):  # collections nest rarely, and never deeply
        multi = np.isin(shapely.get_type_id(geoms), _MULTI)
        if not multi.any():
            break
        geoms = _split(geoms, multi, shapely.get_parts)
    else:
        return None
    types = shapely.get_type_id(geoms)
    polygon = types == 3
    if polygon.any():
        geoms = _split(geoms, polygon, shapely.get_rings)
        types = shapely.get_type_id(geoms)
    if not np.isin(types, (0, 1, 2)).all():
        return None
    return geoms


@dataclass
class ZoneGrid:
    """Zone segments as numpy arrays, and the zones binned by envelope centre (see the module notes).

    Only grid members have their linework here: ``run_x[r], run_y[r]`` are
    the vertices of grid row ``r``'s zone in order, with a NaN vertex
    between two pieces (rings, lines, points) and after the last, so that
    consecutive vertices are its segments and a segment touching a NaN is
    none; a lone point is written twice (a segment from it to itself).
    """

    geoms: np.ndarray  # all zones
    run_x: np.ndarray  # (grid rows, width) float64
    run_y: np.ndarray
    polygonal: np.ndarray  # per zone: a (multi)polygon, at distance 0 from the points it covers
    band: float  # a point farther than this from a polygon's boundary is told in or out by counting crossings
    cell: float  # grid: cell side, origin, shape, cell starts into the members sorted by cell
    x0: float
    y0: float
    nx: int
    ny: int
    cell_start: np.ndarray
    zone: np.ndarray  # members sorted by cell, and their envelope centre and radius (largest vertex distance)
    centre: np.ndarray  # ([x, y, radius], grid rows): three contiguous rows, gathered one by one
    rmax: float  # largest radius in the grid
    other: np.ndarray  # zones not in the grid (big, with many vertices, or collections): GEOS path

    @classmethod
    def build(cls, geoms: np.ndarray, setback: float) -> "ZoneGrid | None":
        """The grid of ``geoms``, or None when it would not pay (then every site takes the GEOS path)."""
        nz = len(geoms)
        coords, owner = shapely.get_coordinates(geoms, return_index=True)
        vcount = np.bincount(owner, minlength=nz)
        if not len(coords) or (vcount == 0).any() or not np.isfinite(coords).all():
            return None
        vstart = np.cumsum(vcount) - vcount
        types = shapely.get_type_id(geoms)
        usable = np.isin(types, (0,) + _SIMPLE) | ((types == 3) & (shapely.get_num_interior_rings(geoms) == 0))
        split = np.flatnonzero(~usable & np.isin(types, (3, 4, 5, 6)))  # holes, multi-parts; not collections
        one_piece = bool(np.isin(types, _SIMPLE + (3,)).all()) and not len(split)  # lines and rings, no holes
        nxt = np.zeros(0, dtype=np.int64)
        if not one_piece:
            # per vertex, the far end of the segment it starts: the next vertex, itself (a lone point), none (-1)
            nxt = np.arange(1, len(coords) + 1)
            nxt[vstart + vcount - 1] = -1
            nxt[vstart[types == 0]] = vstart[types == 0]
        if len(split):
            pieces = _pieces(geoms[split])
            counts = shapely.get_num_coordinates(pieces) if pieces is not None else None
            where = _ranges(vstart[split], vcount[split])
            if counts is not None and int(counts.sum()) == len(where):
                ptype = shapely.get_type_id(pieces)
                keep = counts > 0
                counts, ptype = counts[keep], ptype[keep]
                first = where[np.cumsum(counts) - counts]
                nxt[where[np.cumsum(counts) - 1]] = -1
                nxt[first[ptype == 0]] = first[ptype == 0]
                usable[split] = True
        x, y = coords[:, 0], coords[:, 1]
        env = shapely.bounds(geoms)
        cx, cy = (env[:, 0] + env[:, 2]) / 2, (env[:, 1] + env[:, 3]) / 2
        # in blocks of zones, so that the vertex-sized temporaries stay small (fresh memory is paid in page faults)
        radius = np.empty(nz)
        vend = vstart + vcount
        a = 0
        while a < nz:
            b = max(a + 1, int(np.searchsorted(vend, vstart[a] + _BLOCK, side="right")))
            v0, v1 = int(vstart[a]), int(vend[b - 1])
            dx = x[v0:v1] - np.repeat(cx[a:b], vcount[a:b])  # (vertices are grouped by zone)
            dx *= dx
            dy = y[v0:v1] - np.repeat(cy[a:b], vcount[a:b])
            dy *= dy
            dx += dy
            radius[a:b] = np.maximum.reduceat(dx, vstart[a:b] - v0)
            a = b
        np.sqrt(radius, out=radius)
        if one_piece:
            nseg, written = vcount - 1, vcount
        else:
            nseg = np.bincount(owner[nxt >= 0], minlength=nz)
            # vertices written per zone: each once, a lone point twice, a NaN after each piece but the last
            lone = nxt == np.arange(len(nxt))
            piece_end = (nxt < 0) | lone
            piece_end[vstart + vcount - 1] = False
            step = 1 + lone.astype(np.int64) + piece_end
            written = np.bincount(owner, weights=step, minlength=nz).astype(np.int64)
        if not usable.any():
            return None
        # zones much bigger than the typical one would make every site's bound weak, and many vertices
        # would make the padding wasteful: those go the GEOS way
        cap = 4.0 * float(np.median(radius[usable]))
        member = usable & (radius <= cap) & (written <= _WIDTH) & (nseg > 0)
        members = np.flatnonzero(member)
        if not len(members):
            return None
        rmax = float(radius[members].max())
        gx, gy = cx[members], cy[members]
        x0, y0 = float(gx.min()), float(gy.min())
        w, h = float(gx.max()) - x0, float(gy.max()) - y0
        # about one zone per cell (measured best on the benchmark layer), and wide enough that a zone
        # outside a site's 3 x 3 cells is beyond the setback, so that the verdict needs no other zone
        cell = max(math.sqrt(w * h / len(members)), rmax + float(_slack(np.float64(setback))) + 1e-3)
        nx, ny = int(w // cell) + 1, int(h // cell) + 1
        while nx * ny > 4 * len(members) + 16:  # a thin strip of zones: fewer, wider cells
            cell *= 2.0
            nx, ny = int(w // cell) + 1, int(h // cell) + 1
        if 9.0 * len(members) / (nx * ny) > 200:  # a setback far wider than the zones' spacing: GEOS does better
            return None
        ix = np.floor((gx - x0) / cell).astype(np.int64).clip(0, nx - 1)
        iy = np.floor((gy - y0) / cell).astype(np.int64).clip(0, ny - 1)
        key = iy * nx + ix
        order = np.argsort(key)  # the order of a cell's zones does not matter
        cell_start = np.r_[0, np.cumsum(np.bincount(key, minlength=nx * ny))]
        # the members' vertex runs, in cell order: row r is zone members[order[r]]
        sorted_members = members[order]
        width = int(written[sorted_members].max()) + 1  # room for a NaN after the last vertex
        k = np.arange(width)
        size = written[sorted_members][:, None]
        if one_piece or (written == vcount).all():  # one piece per zone: its run is its vertices as they are
            first = vstart[sorted_members]
            flat = None
        else:  # vertex j goes to position pos[j] of the runs laid end to end, its copy (lone point) after it
            pos = np.cumsum(step) - step
            flat = np.full(int(step.sum()), len(nxt))  # the slots left over are the NaNs
            flat[pos] = np.arange(len(nxt))
            flat[pos[lone] + 1] = np.flatnonzero(lone)
            coords = np.vstack([coords, [[np.nan, np.nan]]])
            first = pos[vstart[sorted_members]]
        x, y = coords[:, 0], coords[:, 1]
        run_x = np.empty((len(sorted_members), width))
        run_y = np.empty((len(sorted_members), width))
        rows_per_block = max(1, _BLOCK // width)
        for a in range(0, len(sorted_members), rows_per_block):
            part = slice(a, a + rows_per_block)
            take = first[part][:, None] + np.minimum(k, size[part] - 1)
            if flat is not None:
                take = flat[take]
            pad = k >= size[part]
            run_x[part] = x[take]
            run_y[part] = y[take]
            run_x[part][pad] = np.nan
            run_y[part][pad] = np.nan
        band = max(1e-6, 1e-12 * max(-float(env.min()), float(env.max())))  # the envelopes hold every vertex
        return cls(
            geoms, run_x, run_y, np.isin(types[sorted_members], (3, 6)), band, cell, x0, y0, nx, ny, cell_start,
            sorted_members, np.stack([cx[sorted_members], cy[sorted_members], radius[sorted_members]]), rmax,
            np.flatnonzero(~member),
        )

    def measure(self, px: np.ndarray, py: np.ndarray, row: np.ndarray, inside: bool) -> tuple[np.ndarray, np.ndarray]:
        """Distance from each point to the segments of its zone (grid row), as GEOS gives it for a point outside.

        With ``inside``, also whether the point is covered by its zone:
        counted crossings where the point is farther than ``band`` from the
        boundary (floating-point rounding cannot flip a crossing there),
        GEOS's ``intersects_xy`` nearer; always False for lines and points.
        """
        out = np.empty(len(row))
        cover = np.zeros(len(row), dtype=bool)
        step = max(1, _SEGMENTS // self.run_x.shape[1])
        for a in range(0, len(row), step):
            vx, vy = self.run_x[row[a:a + step]], self.run_y[row[a:a + step]]
            x, y = px[a:a + step, None], py[a:a + step, None]
            with np.errstate(invalid="ignore", divide="ignore"):
                out[a:a + step] = np.fmin.reduce(_run_distance(x, y, vx, vy), axis=1)
                if inside:
                    ax, ay, bx, by = vx[:, :-1], vy[:, :-1], vx[:, 1:], vy[:, 1:]
                    crosses = ((ay > y) != (by > y)) & (x < (bx - ax) * (y - ay) / (by - ay) + ax)
                    cover[a:a + step] = (np.count_nonzero(crosses, axis=1) % 2) == 1
        if inside:
            cover &= self.polygonal[row]
            doubt = np.flatnonzero((out <= self.band) & self.polygonal[row])
            if len(doubt):
                cover[doubt] = shapely.intersects_xy(self.geoms[self.zone[row[doubt]]], px[doubt], py[doubt])
        return out, cover

    def cell_of(self, xy: np.ndarray) -> np.ndarray:
        """The grid cell of each point (clipped to the grid), numbered row by row."""
        ix = np.clip((xy[:, 0] - self.x0) // self.cell, 0, self.nx - 1).astype(np.int64)
        iy = np.clip((xy[:, 1] - self.y0) // self.cell, 0, self.ny - 1).astype(np.int64)
        return iy * self.nx + ix

    def candidates(
        self, px: np.ndarray, py: np.ndarray, reach: int = 1, ring: bool = False
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(site, grid row, lower bound of their distance) for the zones in the cells around each site.

        The cells are those at most ``reach`` columns and rows from the
        site's own (3 x 3 for 1); with ``ring``, only those exactly ``reach``
        away (the ring around the cells of ``reach - 1``).  Also, per site,
        the distance from it to the outside of the cells.
        """
        fx = (px - self.x0) / self.cell
        fy = (py - self.y0) / self.cell
        ix, iy = np.floor(fx), np.floor(fy)
        ux, uy = fx - ix, fy - iy
        edge = self.cell * (reach + np.minimum(np.minimum(ux, 1.0 - ux), np.minimum(uy, 1.0 - uy)))
        # per site, runs of cells along grid rows: [lo, hi] on each row ``r``
        if ring and reach > 1:  # the whole first and last rows; on the rows between, the two end cells
            side = np.arange(1 - reach, reach, dtype=np.float64)
            r = iy[:, None] + np.r_[-reach, reach, side, side]
            a, b = (ix - reach)[:, None], (ix + reach)[:, None]
            left, right = np.repeat(a, len(side), axis=1), np.repeat(b, len(side), axis=1)
            lo = np.concatenate([a, a, left, right], axis=1)
            hi = np.concatenate([b, b, left, right], axis=1)
        else:
            r = iy[:, None] + np.arange(-reach, reach + 1, dtype=np.float64)
            lo, hi = (ix - reach)[:, None], (ix + reach)[:, None]
        ok = (hi >= 0) & (lo <= self.nx - 1) & (r >= 0) & (r <= self.ny - 1)
        base = np.clip(r, 0, self.ny - 1).astype(np.int64) * self.nx
        starts = self.cell_start[base + np.clip(lo, 0, self.nx - 1).astype(np.int64)]
        counts = np.where(ok, self.cell_start[base + np.clip(hi, 0, self.nx - 1).astype(np.int64) + 1] - starts, 0)
        row = _ranges(starts.ravel(), counts.ravel())
        site = np.repeat(np.arange(len(px)), counts.sum(axis=1))
        cx, cy, radius = self.centre
        dx = px[site]
        dx -= cx[row]
        dy = py[site]
        dy -= cy[row]
        dx *= dx
        dy *= dy
        dx += dy
        lower = np.sqrt(dx, out=dx)
        lower -= radius[row]
        return site, row, lower, edge

    def screen(
        self, px: np.ndarray, py: np.ndarray, setback: float, nearest: bool
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """The grid zones closer than ``setback`` to each point, and the distance to the nearest grid zone.

        Returns ``(site, zone, distance)`` of the pairs below the setback
        (intersecting, for a setback of 0), with the distance GEOS gives;
        and per point an upper bound of its distance to the grid zones,
        exact where ``settled`` (meaningful for the points with no pair).
        """
        n = len(px)
        site, row, lower, edge = self.candidates(px, py)
        near = lower < _slack(np.float64(setback)) if setback > 0 else lower <= _MARGIN_ABS
        ci = np.flatnonzero(near)
        cs, cr = site[ci], row[ci]
        dist, cover = self.measure(px[cs], py[cs], cr, inside=True)
        if setback > 0:
            close = (dist < setback) | cover
            pairs = (cs[close], self.zone[cr[close]], np.where(cover, 0.0, dist)[close])  # GEOS: covered is 0 away
        else:
            close = cover | ((dist <= self.band) & ~self.polygonal[cr])
            if close.any():  # a point on a line or at a point zone: GEOS decides
                maybe = np.flatnonzero(close & ~self.polygonal[cr])
                close[maybe] = shapely.intersects_xy(self.geoms[self.zone[cr[maybe]]], px[cs[maybe]], py[cs[maybe]])
            pairs = (cs[close], self.zone[cr[close]], np.zeros(int(close.sum())))
        upper = _group_min(cs, dist, n)  # exact distances to zones a free point is outside: upper bounds
        if not nearest:
            return (*pairs, upper, np.zeros(n, dtype=bool))
        free = np.ones(n, dtype=bool)
        free[pairs[0]] = False
        if len(row):
            # a site with no zone near: first the candidate with the least lower bound (pairs are grouped by site)
            group = np.flatnonzero(np.r_[True, site[1:] != site[:-1]])
            least = np.minimum.reduceat(lower, group)
            at = np.flatnonzero(lower == np.repeat(least, np.diff(np.r_[group, len(site)])))
            at = at[np.r_[True, site[at][1:] != site[at][:-1]]]
            at = at[free[site[at]] & ~np.isfinite(upper[site[at]])]
            upper[site[at]] = self.measure(px[site[at]], py[site[at]], row[at], inside=False)[0]
            maybe = free[site] & ~near & (lower <= _slack(upper[site]))
            maybe[at] = False
            idx = np.flatnonzero(maybe)
            if len(idx):
                d = self.measure(px[site[idx]], py[site[idx]], row[idx], inside=False)[0]
                upper = np.minimum(upper, _group_min(site[idx], d, n))
        # a zone outside the 3 x 3 cells has its centre at least ``edge`` away, so it is at least edge - rmax away
        settled = np.isfinite(upper) & (_slack(upper) < edge - self.rmax - _MARGIN_ABS)
        # the others (few) look a cell further out, and another, before the GEOS path
        for reach in (2, 3, 4):
            wider = np.flatnonzero(free & ~settled)
            if not len(wider):
                break
            site, row, lower, edge = self.candidates(px[wider], py[wider], reach=reach, ring=True)
            maybe = np.flatnonzero(lower <= _slack(upper[wider][site]))
            if len(maybe):
                d = self.measure(px[wider][site[maybe]], py[wider][site[maybe]], row[maybe], inside=False)[0]
                upper[wider] = np.minimum(upper[wider], _group_min(site[maybe], d, len(wider)))
            settled[wider] = np.isfinite(upper[wider]) & (_slack(upper[wider]) < edge - self.rmax - _MARGIN_ABS)
        return (*pairs, upper, settled)
