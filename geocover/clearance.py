"""Clearance of sites from exclusion zones: which sites are too close, and how far each is from the nearest zone.

Core of the exclusion rule of :func:`geocover.sites.screen_sites`: arrays of
shapely geometries in, arrays out; no files, no printing.

Two questions per site and zone layer:

* **Verdict**: is the site's footprint closer than the setback to a zone,
  and if so which zone is nearest (ties to the lowest feature id)?  One
  STRtree ``dwithin`` query, then the exact GEOS distance on the pairs found.
* **Nearest distance** of the other sites (for ``nearest_exclusion_m``),
  exactly, without a nearest-neighbour search per site (GEOS's
  ``query_nearest`` is several times slower).  These sites lie outside every
  zone, so their distance to a zone is the least distance to a segment (or a
  lone point) of its linework.  For point sites that is computed with numpy,
  with GEOS's own point-to-segment formula term for term (so the value is
  the one ``shapely.distance`` gives, to the last bit on every case we
  compared), over a few zones per site picked by a grid of zone centres:

  1. zones are binned by the centre of their envelope into square cells of
     side ``g``; a zone whose vertices are all within ``R`` of its centre is
     at least ``|p - c| - R`` from a site ``p``;
  2. a site's candidates are the zones in the 3 x 3 cells around it; the
     exact distance to the one with the least lower bound gives an upper
     bound ``u``, then the candidates whose lower bound does not exceed
     ``u`` are measured exactly;
  3. every zone outside the 3 x 3 block has its centre at least ``g`` away,
     so it is at least ``g - R_max`` away: when that exceeds ``u`` the site
     is done.  Other sites (far from the zones, or near a zone too big for
     the grid) take the general path below, with ``u`` as their bound.

  Parcels, and the sites the grid does not settle, use the general path: an
  upper bound (the nearest zone vertex of a subsample, by KD-tree, or ``u``),
  the zones whose envelope meets the footprint's envelope grown by it (one
  STRtree query), and the least exact GEOS distance over those.

Both steps run in chunks of sites, in a thread pool when one is given
(GEOS, scipy's KD-tree and large numpy operations release the GIL); the
results do not depend on the chunking or the number of threads.
"""

from __future__ import annotations

import math
from concurrent.futures import Executor
from dataclasses import dataclass
from typing import Any, Callable, Sequence, TypeVar

import numpy as np
import shapely

__all__: list[str] = []  # internal to geocover.sites

_CHUNK = 4096  # sites per task: small arrays stay in cache, and there are tasks for every thread
_SEGMENTS = 1 << 16  # segment distances evaluated per numpy batch
_WIDTH = 64  # zones with more segments take the GEOS path
_MARGIN_REL, _MARGIN_ABS = 1e-9, 1e-6  # slack on bounds for rounding (metres)

T = TypeVar("T")


def _map(fn: Callable[[slice], T], n: int, pool: Executor | None, chunk: int = _CHUNK) -> list[T]:
    """``fn`` on consecutive slices of ``range(n)``, in order; in ``pool`` when given."""
    parts = [slice(a, min(a + chunk, n)) for a in range(0, n, chunk)]
    if pool is None or len(parts) < 2:
        return [fn(part) for part in parts]
    return list(pool.map(fn, parts))


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
) -> Hits:
    """Which footprints (at ``rows``) are closer than ``setback`` to a zone, and their nearest-zone distance.

    A site is rejected when the exact distance from its footprint to a zone
    is below the setback (with no setback: when it intersects a zone); the
    rejecting feature is the nearest such zone, ties to the lowest feature
    id, and the site's nearest distance is that zone's.  The nearest
    distance of the other sites is the least over all zones.  See the module
    notes for how.
    """
    n = len(footprints)
    hit = np.zeros(n, dtype=bool)
    feature = np.full(n, -1, dtype=np.int64)
    near = np.full(n, np.inf)
    if not len(geoms) or not len(rows):
        return Hits(hit, feature, near)
    query = footprints[rows]
    on_grid = shapely.get_type_id(query) == 0
    grid = _ZoneGrid.build(geoms, setback) if on_grid.any() else None
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
        gxy = xy[rows[gridded]]

        def on(part: slice) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
            site, zone, dist, up, done = grid.screen(gxy[part], setback, nearest)
            return site + part.start, zone, dist, up, done

        parts = _map(on, len(gridded), pool)
        found.append((gridded[np.concatenate([p[0] for p in parts])], np.concatenate([p[1] for p in parts]),
                      np.concatenate([p[2] for p in parts])))
        upper = np.concatenate([p[3] for p in parts])
        settled = np.concatenate([p[4] for p in parts])
        if len(grid.other):  # the zones the grid leaves out, by GEOS
            others = geoms[grid.other]
            trees["other"] = shapely.STRtree(others)
            site, zone, dist = _close_pairs(trees["other"], others, query[gridded], setback, pool)
            found.append((gridded[site], grid.other[zone], dist))
    rest_rows = np.flatnonzero(~on_grid)
    if len(rest_rows):
        site, zone, dist = _close_pairs(tree(), geoms, query[rest_rows], setback, pool)
        found.append((rest_rows[site], zone, dist))
    at = np.concatenate([f[0] for f in found])
    zone = np.concatenate([f[1] for f in found])
    dist = np.concatenate([f[2] for f in found])
    if len(at):
        # the nearest rejecting feature per site, ties to the lowest feature id
        order = np.lexsort((ids[zone], dist, at))
        first = order[np.unique(at[order], return_index=True)[1]]
        site = rows[at[first]]
        hit[site] = True
        feature[site] = ids[zone[first]]
        near[site] = dist[first]
    if not nearest:
        return Hits(hit, feature, near)
    # the others are outside every zone: their nearest distance
    free = ~hit[rows]
    if grid is not None:
        done = free[gridded] & settled
        value = upper[done]
        if len(grid.other):
            others = geoms[grid.other]
            pick = rows[gridded[done]]
            value = np.minimum(value, _by_envelope(trees["other"], others, footprints[pick], xy[pick], value, pool))
        near[rows[gridded[done]]] = value
        todo = free[gridded] & ~settled
        pick = rows[gridded[todo]]
        near[pick] = _by_envelope(tree(), geoms, footprints[pick], xy[pick], upper[todo], pool)
    pick = rows[rest_rows[free[rest_rows]]]
    if len(pick):
        near[pick] = _by_envelope(tree(), geoms, footprints[pick], xy[pick], np.full(len(pick), np.inf), pool)
    return Hits(hit, feature, near)


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

    found = _map(part_pairs, len(query), pool)
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

    return np.concatenate(_map(part_min, len(query), pool)) if len(query) else np.zeros(0)


def _group_min(index: np.ndarray, values: np.ndarray, n: int) -> np.ndarray:
    """Least of ``values`` per ``index`` in ``0..n-1`` (inf where there is none)."""
    out = np.full(n, np.inf)
    if len(index):
        order = np.argsort(index, kind="stable")
        index, values = index[order], values[order]
        starts = np.flatnonzero(np.r_[True, index[1:] != index[:-1]])
        out[index[starts]] = np.minimum.reduceat(values, starts)
    return out


def _ranges(starts: np.ndarray, counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The concatenation of ``range(s, s + c)`` for each pair, and the owner of each element."""
    total = int(counts.sum())
    owner = np.repeat(np.arange(len(counts)), counts)
    offsets = np.cumsum(counts) - counts
    return np.arange(total) - np.repeat(offsets - starts, counts), owner


def _point_segment(px: np.ndarray, py: np.ndarray, ax: np.ndarray, ay: np.ndarray, bx: np.ndarray, by: np.ndarray) -> np.ndarray:
    """Distance from points p to segments ab, as GEOS computes it (``Distance::pointToSegment``), term for term.

    A degenerate segment (a == b) gives the distance to the point a.
    """
    bax, bay = bx - ax, by - ay
    pax, pay = px - ax, py - ay
    len2 = bax * bax + bay * bay
    with np.errstate(divide="ignore", invalid="ignore"):
        r = (pax * bax + pay * bay) / len2
        s = ((ay - py) * bax - (ax - px) * bay) / len2
        out = np.abs(s) * np.sqrt(len2)
    pbx, pby = px - bx, py - by
    out = np.where(r >= 1.0, np.sqrt(pbx * pbx + pby * pby), out)
    return np.where((r <= 0.0) | (len2 == 0.0), np.sqrt(pax * pax + pay * pay), out)


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
class _ZoneGrid:
    """Zone segments as numpy arrays, and the zones binned by envelope centre (see the module notes).

    Only grid members have segments here; ``seg`` holds them padded to the
    widest member, ``(zone, k, [ax, ay, bx, by])``, NaN past a zone's last
    segment.  A lone point is a segment from the point to itself.
    """

    geoms: np.ndarray  # all zones
    seg: np.ndarray  # (zones, width, 4) float64
    polygonal: np.ndarray  # per zone: a (multi)polygon, at distance 0 from the points it covers
    band: float  # a point farther than this from a polygon's boundary is told in or out by counting crossings
    cell: float  # grid: cell side, origin, shape, cell starts into the members sorted by cell
    x0: float
    y0: float
    nx: int
    ny: int
    cell_start: np.ndarray
    zone: np.ndarray  # members sorted by cell, with their envelope centre and radius (largest vertex distance)
    cx: np.ndarray
    cy: np.ndarray
    radius: np.ndarray
    rmax: float  # largest radius in the grid
    other: np.ndarray  # zones not in the grid (big, with many vertices, or collections): GEOS path

    @classmethod
    def build(cls, geoms: np.ndarray, setback: float) -> "_ZoneGrid | None":
        """The grid of ``geoms``, or None when it would not pay (then every site takes the GEOS path)."""
        nz = len(geoms)
        coords, owner = shapely.get_coordinates(geoms, return_index=True)
        vcount = np.bincount(owner, minlength=nz)
        if not len(coords) or (vcount == 0).any() or not np.isfinite(coords).all():
            return None
        vstart = np.cumsum(vcount) - vcount
        # per vertex, the far end of the segment it starts: the next vertex, itself (a lone point), none (-1)
        nxt = np.arange(1, len(coords) + 1)
        nxt[vstart + vcount - 1] = -1
        types = shapely.get_type_id(geoms)
        nxt[vstart[types == 0]] = vstart[types == 0]
        usable = np.isin(types, (0,) + _SIMPLE) | ((types == 3) & (shapely.get_num_interior_rings(geoms) == 0))
        split = np.flatnonzero(~usable & np.isin(types, (3, 4, 5, 6)))  # holes, multi-parts; not collections
        if len(split):
            pieces = _pieces(geoms[split])
            counts = shapely.get_num_coordinates(pieces) if pieces is not None else None
            where, _ = _ranges(vstart[split], vcount[split])
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
        radius = np.sqrt(np.maximum.reduceat((x - cx[owner]) ** 2 + (y - cy[owner]) ** 2, vstart))
        live = nxt >= 0
        nseg = np.bincount(owner[live], minlength=nz)
        if not usable.any():
            return None
        # zones much bigger than the typical one would make every site's bound weak, and many vertices
        # would make the padding wasteful: those go the GEOS way
        cap = 4.0 * float(np.median(radius[usable]))
        member = usable & (radius <= cap) & (nseg <= _WIDTH) & (nseg > 0)
        members = np.flatnonzero(member)
        if not len(members):
            return None
        rmax = float(radius[members].max())
        gx, gy = cx[members], cy[members]
        x0, y0 = float(gx.min()), float(gy.min())
        w, h = float(gx.max()) - x0, float(gy.max()) - y0
        # about two zones per cell; wide enough that a zone outside a site's 3 x 3 cells is beyond the
        # setback (so the verdict needs no other zone) and often beyond the nearest one
        cell = max(math.sqrt(w * h * 2.0 / len(members)), 2.0 * rmax, rmax + float(_slack(np.float64(setback))) + 1e-3)
        nx, ny = int(w // cell) + 1, int(h // cell) + 1
        while nx * ny > 4 * len(members) + 16:  # a thin strip of zones: fewer, wider cells
            cell *= 2.0
            nx, ny = int(w // cell) + 1, int(h // cell) + 1
        if 9.0 * len(members) / (nx * ny) > 200:  # a setback far wider than the zones' spacing: GEOS does better
            return None
        ix = np.floor((gx - x0) / cell).astype(np.int64).clip(0, nx - 1)
        iy = np.floor((gy - y0) / cell).astype(np.int64).clip(0, ny - 1)
        key = iy * nx + ix
        order = np.argsort(key, kind="stable")
        cell_start = np.searchsorted(key[order], np.arange(nx * ny + 1))
        # padded segments of the members, in cell order: row r is zone members[order[r]]
        sorted_members = members[order]
        width = int(nseg[sorted_members].max())
        first_live = np.flatnonzero(live)
        seg_start = np.cumsum(nseg) - nseg
        k = np.arange(width)
        valid = k < nseg[sorted_members][:, None]
        at = first_live[np.minimum(seg_start[sorted_members][:, None] + k, len(first_live) - 1)]
        seg = np.full((len(sorted_members), width, 4), np.nan)
        seg[..., 0] = np.where(valid, x[at], np.nan)
        seg[..., 1] = np.where(valid, y[at], np.nan)
        seg[..., 2] = np.where(valid, x[nxt[at]], np.nan)
        seg[..., 3] = np.where(valid, y[nxt[at]], np.nan)
        band = max(1e-6, 1e-12 * float(np.abs(coords).max()))
        return cls(
            geoms, seg, np.isin(types[sorted_members], (3, 6)), band, cell, x0, y0, nx, ny, cell_start,
            sorted_members, cx[sorted_members], cy[sorted_members], radius[sorted_members], rmax,
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
        step = max(1, _SEGMENTS // self.seg.shape[1])
        for a in range(0, len(row), step):
            s = self.seg[row[a:a + step]]
            ax, ay, bx, by = s[..., 0], s[..., 1], s[..., 2], s[..., 3]
            x, y = px[a:a + step, None], py[a:a + step, None]
            with np.errstate(invalid="ignore"):
                out[a:a + step] = np.fmin.reduce(_point_segment(x, y, ax, ay, bx, by), axis=1)
                if inside:
                    with np.errstate(divide="ignore"):
                        crosses = ((ay > y) != (by > y)) & (x < (bx - ax) * (y - ay) / (by - ay) + ax)
                    cover[a:a + step] = (np.count_nonzero(crosses, axis=1) % 2) == 1
        if inside:
            cover &= self.polygonal[row]
            doubt = np.flatnonzero((out <= self.band) & self.polygonal[row])
            if len(doubt):
                cover[doubt] = shapely.intersects_xy(self.geoms[self.zone[row[doubt]]], px[doubt], py[doubt])
        return out, cover

    def candidates(self, px: np.ndarray, py: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(site, grid row, lower bound of their distance) for the zones in the 3 x 3 cells around each site.

        Also, per site, the distance from it to the outside of its 3 x 3 cells.
        """
        fx = (px - self.x0) / self.cell
        fy = (py - self.y0) / self.cell
        ix, iy = np.floor(fx), np.floor(fy)
        edge = self.cell * np.minimum.reduce([fx - ix + 1, 2 - (fx - ix), fy - iy + 1, 2 - (fy - iy)])
        lo = np.clip(ix - 1, 0, self.nx - 1).astype(np.int64)
        hi = np.clip(ix + 1, 0, self.nx - 1).astype(np.int64)
        col_ok = (ix + 1 >= 0) & (ix - 1 <= self.nx - 1)
        starts = np.empty((len(px), 3), dtype=np.int64)
        counts = np.empty((len(px), 3), dtype=np.int64)
        for j, dy in enumerate((-1, 0, 1)):
            r = iy + dy
            ok = col_ok & (r >= 0) & (r <= self.ny - 1)
            base = np.clip(r, 0, self.ny - 1).astype(np.int64) * self.nx
            starts[:, j] = self.cell_start[base + lo]
            counts[:, j] = np.where(ok, self.cell_start[base + hi + 1] - starts[:, j], 0)
        row, _ = _ranges(starts.ravel(), counts.ravel())
        per_site = counts.sum(axis=1)
        site = np.repeat(np.arange(len(px)), per_site)
        lower = np.hypot(np.repeat(px, per_site) - self.cx[row], np.repeat(py, per_site) - self.cy[row]) - self.radius[row]
        return site, row, lower, edge

    def screen(
        self, xy: np.ndarray, setback: float, nearest: bool
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """The grid zones closer than ``setback`` to each point, and the distance to the nearest grid zone.

        Returns ``(site, zone, distance)`` of the pairs below the setback
        (intersecting, for a setback of 0), with the distance GEOS gives;
        and per point an upper bound of its distance to the grid zones,
        exact where ``settled`` (meaningful for the points with no pair).
        """
        n = len(xy)
        px, py = np.ascontiguousarray(xy[:, 0]), np.ascontiguousarray(xy[:, 1])
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
        return (*pairs, upper, settled)
