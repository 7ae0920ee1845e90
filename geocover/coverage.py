"""Planar and geodesic coverage: which sites reach which demand, sparse and chunked.

Both functions return a :class:`~geocover.values.Reach` whose CSR matrix
(demand x sites) stores the distance in metres of every covering pair.
Coverage is **inclusive**: a pair at exactly the limit is covered.

Planar coverage (:func:`reach_planar`) measures straight lines in a projected
CRS.  It never forms a dense matrix: demand is processed in chunks of rows;
inside a chunk the demand points are sorted into horizontal strips of height
``limit / 8`` and, for every site, only the demand points of each strip that
lie within the disc's chord over that strip are measured.  The candidate
pairs are therefore about 1.1 x the covering pairs, and the cost grows with
the pairs found, not with ``n x m``.  Pairs come out site-major, so one
linear transpose gives each CSR row its columns in increasing order (no sort).

Geodesic coverage (:func:`reach_geodesic`) measures on the CRS's ellipsoid
with :class:`pyproj.Geod` (Karney's algorithms).  Candidates come from a
k-d tree over earth-centred (ECEF) coordinates: a straight chord is never
longer than the geodesic between the same two surface points, so "chord <=
limit" keeps every covered pair, across the antimeridian and at the poles
alike.

>>> import numpy as np
>>> from geocover.values import Demand, Sites
>>> d = Demand(np.array([[0.0, 0.0], [3.0, 4.0], [6.0, 8.0]]), np.ones(3), crs="EPSG:32633")
>>> s = Sites(np.array([[0.0, 0.0]]), crs="EPSG:32633")
>>> r = reach_planar(d, s, 5.0)
>>> r.matrix.toarray().ravel().tolist()   # (3, 4) is exactly 5 m away: covered
[0.0, 5.0, 0.0]
>>> r.coverable.tolist()
[True, True, False]
"""

from __future__ import annotations

import logging
import math
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import numpy as np
import scipy.sparse as sp

from .crs import as_crs, crs_label, require_projected
from .errors import CRSError, InputError, ParameterError
from .values import Demand, Metric, Reach, ServiceRule, Sites

__all__ = ["reach_planar", "reach_geodesic", "estimate_pairs", "check_memory", "BYTES_PER_PAIR"]

logger = logging.getLogger(__name__)

#: Bytes the finished relation holds per covering pair (int32 column + float64 value),
#: plus 25 % for the chunk being assembled; used by :func:`check_memory`.
BYTES_PER_PAIR = 15.0

_STRIPS_PER_LIMIT = 8  # strip height = limit / 8: about 10 % more candidates than pairs
_CANDIDATES_PER_BLOCK = 131_072  # candidates per block: small temporaries stay in cache and off fresh pages
_SITES_PER_BLOCK = 32_768  # sites whose strip ranges are computed at once
_PAIRS_PER_CHUNK = 4_000_000  # rows per chunk are cut so that a chunk holds about this many pairs


# --------------------------------------------------------------------------- checks


def _check_limit(limit: Any, name: str = "limit", unit: str = "metres") -> float:
    try:
        value = float(limit)
    except (TypeError, ValueError):
        raise ParameterError(f"{name}: expected a positive number of {unit}, got {limit!r}", name) from None
    if not (math.isfinite(value) and value > 0):
        raise ParameterError(f"{name}: the service limit must be a positive, finite number of {unit}, got {limit!r}", name)
    return value


def _check_count(value: Any, name: str) -> int:
    """A whole number of 1 or more (rows per chunk, threads)."""
    try:
        count = int(value)
    except (TypeError, ValueError, OverflowError):
        count = 0
    if count < 1:
        raise ParameterError(f"{name}: must be a whole number, 1 or more, got {value!r}", name)
    return count


def _check_pair(demand: Demand, sites: Sites) -> None:
    if not isinstance(demand, Demand):
        raise InputError(f"demand: expected a geocover Demand, got {type(demand).__name__}")
    if not isinstance(sites, Sites):
        raise InputError(f"sites: expected geocover Sites, got {type(sites).__name__}")


def _same_crs(demand: Demand, sites: Sites) -> None:
    if demand.crs is None or sites.crs is None:
        return
    if demand.crs == sites.crs:
        return
    if not as_crs(demand.crs, "demand CRS").equals(as_crs(sites.crs, "sites CRS")):
        raise CRSError(
            f"sites are in {crs_label(sites.crs)} but demand is in {crs_label(demand.crs)}; "
            "reproject the sites to the demand's working CRS before building coverage"
        )


# --------------------------------------------------------------------------- planar kernel


def _empty_csr(n: int, m: int) -> sp.csr_matrix:
    return sp.csr_matrix(
        (np.zeros(0, np.float64), np.zeros(0, np.int32), np.zeros(n + 1, np.int32)), shape=(n, m)
    )


def _planar_chunk(dxy: np.ndarray, sxy: np.ndarray, limit: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Covering pairs of one demand chunk as a CSR triple (indptr, indices, data).

    Rows are local to the chunk; each row's columns come out in increasing order.
    """
    n, m = len(dxy), len(sxy)
    if n == 0 or m == 0:
        return np.zeros(n + 1, np.int64), np.zeros(0, np.int32), np.zeros(0, np.float64)
    dx, dy = dxy[:, 0], dxy[:, 1]
    x0, x1 = float(dx.min()), float(dx.max())
    y0, y1 = float(dy.min()), float(dy.max())
    sx, sy = sxy[:, 0], sxy[:, 1]
    sel = np.flatnonzero((sx >= x0 - limit) & (sx <= x1 + limit) & (sy >= y0 - limit) & (sy <= y1 + limit))
    if len(sel) == 0:
        return np.zeros(n + 1, np.int64), np.zeros(0, np.int32), np.zeros(0, np.float64)

    # demand sorted by (strip, x) through one float key: strip * width + shifted x
    k = _STRIPS_PER_LIMIT
    height = limit / k
    span = (x1 - x0) + 2.0 * limit  # shifted x of demand lies in [limit, x1 - x0 + limit]
    width = span + height  # strips are at least `height` apart in key space
    strip_d = np.floor((dy - y0) / height)
    key = strip_d * width + (dx - x0 + limit)
    order = np.argsort(key)
    skey = key[order]
    sdx, sdy = dx[order], dy[order]
    n_strips = int(strip_d.max()) + 1
    pad = 8.0 * float(np.spacing(abs(skey[-1]) + width)) + 1e-9 * limit

    # for each selected site, the strips its disc can touch and the chord half-width over each
    # (in blocks of sites, so that the per-strip arrays stay small when there are very many sites)
    offsets = np.arange(-k - 1, k + 2, dtype=np.float64)
    tol = 1e-9 * (abs(y0) + abs(y1) + limit)
    lim_sq = limit * limit * (1.0 + 8.0 * np.finfo(np.float64).eps)
    rows_parts, cols_parts, vals_parts = [], [], []
    for s0 in range(0, len(sel), _SITES_PER_BLOCK):
        sel_b = sel[s0 : s0 + _SITES_PER_BLOCK]
        ssx, ssy = sx[sel_b], sy[sel_b]
        strip_s = np.floor((ssy - y0) / height)
        strip = strip_s[:, None] + offsets[None, :]  # (m_sel, J), site-major when flattened
        bottom = y0 + strip * height
        # vertical gap from the site to the strip, made a little smaller so that rounding in the
        # strip assignment can only widen the measured chord (the exact check comes later)
        gap = np.maximum(np.maximum(bottom - ssy[:, None], ssy[:, None] - (bottom + height)) - tol, 0.0)
        valid = (strip >= 0) & (strip < n_strips) & (gap <= limit)
        half = np.sqrt(np.maximum(limit * limit - gap * gap, 0.0))
        lo_off = np.clip(ssx[:, None] - half - x0 + limit, 0.0, span)
        hi_off = np.clip(ssx[:, None] + half - x0 + limit, 0.0, span)
        lo = np.searchsorted(skey, (strip * width + lo_off - pad).ravel(), side="left")
        hi = np.searchsorted(skey, (strip * width + hi_off + pad).ravel(), side="right")
        count = np.where(valid.ravel(), hi - lo, 0)
        count[count < 0] = 0
        ranges = np.flatnonzero(count)
        lo, count = lo[ranges], count[ranges]
        range_site = sel_b[ranges // len(offsets)]

        # blocks of whole ranges, each with at most ~_CANDIDATES_PER_BLOCK candidates (unless one range is bigger)
        cum = np.cumsum(count)
        cuts = np.searchsorted(cum, np.arange(_CANDIDATES_PER_BLOCK, int(cum[-1]) if len(cum) else 0, _CANDIDATES_PER_BLOCK), side="left") + 1
        bounds = np.unique(np.concatenate([[0], cuts, [len(count)]]))
        for a, b in zip(bounds[:-1], bounds[1:]):
            if b <= a:
                continue
            c_lo, c_n, c_site = lo[a:b], count[a:b], range_site[a:b]
            total = int(c_n.sum())
            idx_t = np.int32 if total < 2**31 and n < 2**31 else np.int64
            first = np.cumsum(c_n) - c_n
            pos = np.repeat((c_lo - first).astype(idx_t), c_n) + np.arange(total, dtype=idx_t)
            site = np.repeat(c_site.astype(np.int32), c_n)
            ddx = sdx[pos] - sx[site]
            d2 = ddx * ddx
            del ddx
            ddy = sdy[pos] - sy[site]
            d2 += ddy * ddy
            del ddy
            near = np.flatnonzero(d2 <= lim_sq)
            dist = np.sqrt(d2[near])
            inside = dist <= limit  # the documented rule: float64 sqrt(dx^2 + dy^2) <= limit
            near = near[inside]
            rows_parts.append(order[pos[near]].astype(np.int32 if n < 2**31 else np.int64))
            cols_parts.append(site[near])
            vals_parts.append(dist[inside])
    rows = np.concatenate(rows_parts) if rows_parts else np.zeros(0, np.int32)
    cols = np.concatenate(cols_parts) if cols_parts else np.zeros(0, np.int32)
    vals = np.concatenate(vals_parts) if vals_parts else np.zeros(0, np.float64)
    del rows_parts, cols_parts, vals_parts
    # pairs are grouped by site in increasing order: a CSC structure; its transpose is a canonical CSR
    colptr = np.zeros(m + 1, dtype=np.int64)
    np.cumsum(np.bincount(cols, minlength=m), out=colptr[1:])
    csc = sp.csc_matrix((vals, rows, colptr), shape=(n, m))
    csr = csc.tocsr()
    return csr.indptr.astype(np.int64), csr.indices.astype(np.int32, copy=False), csr.data


def _assemble(parts: Any, bounds: list[tuple[int, int]], n: int, m: int, estimate: int) -> sp.csr_matrix:
    """Write chunk CSR triples, in row order, straight into arrays sized from the estimate.

    The arrays are allocated once (``estimate`` + 5 %) and grown only if the
    estimate was short; pages past the last pair are never touched, so the
    relation costs its own size plus one chunk.
    """
    cap = int(estimate * 1.05) + 65_536
    idx_t = np.int32 if m < 2**31 else np.int64
    indices = np.empty(cap, dtype=idx_t)
    data = np.empty(cap, dtype=np.float64)
    indptr = np.zeros(n + 1, dtype=np.int64)
    at = 0
    for (a, b), (ptr, ind, val) in zip(bounds, parts):
        k = len(ind)
        if at + k > cap:
            cap = max(2 * cap, at + k)
            logger.debug("planar coverage: the pair estimate was short; growing to %d", cap)
            grown_i, grown_d = np.empty(cap, dtype=idx_t), np.empty(cap, dtype=np.float64)
            grown_i[:at], grown_d[:at] = indices[:at], data[:at]
            indices, data = grown_i, grown_d
        indices[at : at + k] = ind
        data[at : at + k] = val
        indptr[a + 1 : b + 1] = ptr[1:] + at
        at += k
        del ptr, ind, val
    if at < 2**31:
        indptr = indptr.astype(np.int32)
        indices = indices[:at]
    else:
        indices = indices[:at].astype(np.int64)
    mat = sp.csr_matrix((data[:at], indices, indptr), shape=(n, m), copy=False)
    # every (row, column) pair is produced once and each row's columns are increasing (see _planar_chunk)
    mat.has_canonical_format = True
    return mat


def _chunk_bounds(n: int, rows: int) -> list[tuple[int, int]]:
    return [(a, min(a + rows, n)) for a in range(0, n, rows)]


# --------------------------------------------------------------------------- estimate and budget


def estimate_pairs(demand: Demand, sites: Sites, limit_m: float, sample: int = 20_000, seed: int = 0) -> int:
    """Estimate the number of covering pairs before building the relation.

    Counts the sites within ``limit_m`` of a random sample of ``sample``
    demand points (all of them when there are fewer) with a k-d tree and
    scales up.  The count is exact when the sample is the whole demand.

    Parameters
    ----------
    demand, sites : Demand, Sites
        In the same projected CRS.
    limit_m : float
        Service distance in metres (inclusive).
    sample : int
        Demand points to measure.
    seed : int
        Seed of the sample, so that the estimate is repeatable.

    Returns
    -------
    int
        Estimated number of stored pairs.

    >>> import numpy as np
    >>> from geocover.values import Demand, Sites
    >>> d = Demand(np.array([[0.0, 0.0], [10.0, 0.0]]), np.ones(2))
    >>> estimate_pairs(d, Sites(np.array([[0.0, 0.0], [4.0, 0.0]])), 5.0)
    2
    """
    from scipy.spatial import cKDTree

    _check_pair(demand, sites)
    limit = _check_limit(limit_m, "limit")
    n, m = len(demand), len(sites)
    if n == 0 or m == 0:
        return 0
    if sample <= 0:
        raise ParameterError(f"sample: must be a positive number of demand points, got {sample}", "sample")
    if n <= sample:
        pts = demand.xy
    else:
        pts = demand.xy[np.random.default_rng(seed).choice(n, size=sample, replace=False)]
    counts = cKDTree(sites.xy).query_ball_point(pts, r=limit, return_length=True)
    return int(round(float(np.sum(counts)) * n / len(pts)))


def check_memory(
    pairs: int, budget_gb: float | None, n_demand: int, what: str = "coverage", bytes_per_pair: float = BYTES_PER_PAIR
) -> None:
    """Refuse, before any work, a relation that would not fit in ``budget_gb``.

    ``bytes_per_pair`` is the peak memory per pair of the method (default
    :data:`BYTES_PER_PAIR`).  The error names the demand coarsening factor
    that would fit: merging ``f x f`` grid cells into one divides the
    demand points, and so the pairs, by about ``f**2``.
    """
    if budget_gb is None:
        return
    try:
        budget = float(budget_gb)
    except (TypeError, ValueError):
        budget = math.nan
    if not (math.isfinite(budget) and budget > 0):
        raise ParameterError(f"memory_budget_gb: must be a positive number of GB, got {budget_gb!r}", "memory_budget_gb")
    need_gb = pairs * bytes_per_pair / 1e9
    if need_gb <= budget:
        return
    ratio = need_gb / budget
    factor = max(2, math.ceil(math.sqrt(ratio)))
    raise InputError(
        f"{what}: about {pairs:,} demand-site pairs ({need_gb:.1f} GB) would not fit in the memory budget of "
        f"{budget:g} GB; coarsen the demand grid by a factor of {factor} ({factor}x{factor} cells into one, "
        f"about {pairs // (factor * factor):,} pairs from {n_demand // (factor * factor):,} points), "
        "shorten the service limit, or raise memory_budget_gb"
    )


# --------------------------------------------------------------------------- planar


def reach_planar(
    demand: Demand,
    sites: Sites,
    limit_m: float,
    *,
    chunk_rows: int = 200_000,
    threads: int = 1,
    memory_budget_gb: float | None = None,
) -> Reach:
    """Straight-line coverage in a projected CRS.

    A site covers a demand point when their Euclidean distance, computed in
    float64 as ``sqrt(dx**2 + dy**2)``, is **at most** ``limit_m``
    (inclusive: a point exactly at the limit is covered).

    Parameters
    ----------
    demand : Demand
        Demand points in a projected CRS in metres.
    sites : Sites
        Sites in the same CRS.
    limit_m : float
        Service distance in metres, > 0.
    chunk_rows : int
        Most demand rows handled at once; chunks are cut smaller when the
        pairs per row are many, so that a chunk holds about 4 million pairs.
    threads : int
        Chunks handled in parallel (numpy releases the GIL in the heavy
        kernels); 1 runs in the calling thread.
    memory_budget_gb : float, optional
        Refuse (with :class:`~geocover.errors.InputError` naming the demand
        coarsening factor that would fit) when the estimated relation needs
        more; see :func:`estimate_pairs` and :func:`check_memory`.

    Returns
    -------
    Reach
        CSR demand x sites, values = distances in metres (float64), rule
        ``ServiceRule(Metric.PLANAR, limit_m, "m")``.

    Raises
    ------
    CRSError
        When the demand CRS is geographic (use a projected CRS or
        :func:`reach_geodesic`) or the sites are in another CRS.
    ParameterError
        When the limit is not a positive number (``param="limit"``), or
        ``chunk_rows``/``threads`` are below 1.
    """
    _check_pair(demand, sites)
    limit = _check_limit(limit_m, "limit")
    # the CRS the distances are measured in: the demand's, or the sites' when only they carry one
    if demand.crs is not None:
        require_projected(demand.crs, "demand CRS")
    elif sites.crs is not None:
        require_projected(sites.crs, "sites CRS")
    _same_crs(demand, sites)
    chunk_rows = _check_count(chunk_rows, "chunk_rows")
    threads = _check_count(threads, "threads")
    rule = ServiceRule(Metric.PLANAR, limit, "m")
    n, m = len(demand), len(sites)
    if n == 0 or m == 0:
        return Reach.from_matrix(_empty_csr(n, m), demand, sites, rule)
    est = estimate_pairs(demand, sites, limit, sample=min(n, 5_000))
    check_memory(est, memory_budget_gb, n, "planar coverage")
    per_row = max(est / n, 1.0)
    rows = int(max(256, min(chunk_rows, _PAIRS_PER_CHUNK / per_row)))
    bounds = _chunk_bounds(n, rows)
    logger.debug("planar coverage: %d x %d, limit %g m, ~%d pairs, %d chunk(s)", n, m, limit, est, len(bounds))
    dxy, sxy = demand.xy, sites.xy

    def run(ab: tuple[int, int]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        return _planar_chunk(dxy[ab[0] : ab[1]], sxy, limit)

    if threads == 1 or len(bounds) == 1:
        mat = _assemble((run(ab) for ab in bounds), bounds, n, m, est)
    else:
        with ThreadPoolExecutor(max_workers=threads) as pool:
            mat = _assemble(pool.map(run, bounds), bounds, n, m, est)
    return Reach.from_matrix(mat, demand, sites, rule)


# --------------------------------------------------------------------------- geodesic


def _geod_for(crs: Any, ellipsoid: Any) -> Any:
    """The :class:`pyproj.Geod` to measure with: ``ellipsoid`` when given, else the CRS's own."""
    from pyproj import Geod
    from pyproj.list import get_ellps_map

    if isinstance(ellipsoid, Geod):
        return ellipsoid
    if ellipsoid is not None:
        name = str(ellipsoid)
        known = get_ellps_map()
        if name not in known:
            raise ParameterError(
                f"ellipsoid: {name!r} is not a known ellipsoid; use one of e.g. WGS84, GRS80, intl, bessel, clrk66 "
                f"({len(known)} names in pyproj.list.get_ellps_map()), or leave it unset to use the CRS's own",
                "ellipsoid",
            )
        return Geod(ellps=name)
    if crs is None:
        raise CRSError(
            "geodesic coverage: the demand has no CRS, so the ellipsoid is unknown; give the demand a CRS "
            "(e.g. EPSG:4326 for lon/lat) or name the ellipsoid (ellipsoid='WGS84')"
        )
    geod = as_crs(crs, "demand CRS").get_geod()
    if geod is None:
        raise CRSError(f"geodesic coverage: the CRS {crs_label(crs)} has no ellipsoid; name one (ellipsoid='WGS84')")
    return geod


def _to_lonlat(xy: np.ndarray, crs: Any, what: str = "demand") -> tuple[np.ndarray, np.ndarray]:
    """Longitudes and latitudes (degrees) of ``xy`` given in ``crs`` (lon/lat when geographic)."""
    from pyproj import Transformer

    xy = np.asarray(xy, dtype=np.float64).reshape(-1, 2)
    if crs is None:
        lon, lat = xy[:, 0].copy(), xy[:, 1].copy()
    else:
        c = as_crs(crs, f"{what} CRS")
        if c.is_geographic:
            # a geographic Demand/Sites holds x = longitude, y = latitude (see values.Demand)
            lon, lat = xy[:, 0].copy(), xy[:, 1].copy()
        else:
            tr = Transformer.from_crs(c, c.geodetic_crs, always_xy=True)
            lon, lat = (np.asarray(v, dtype=np.float64) for v in tr.transform(xy[:, 0], xy[:, 1]))
    if lat.size and (np.abs(lat) > 90.0).any():
        bad = int(np.flatnonzero(np.abs(lat) > 90.0)[0])
        raise InputError(
            f"{what}: point {bad} has latitude {lat[bad]:g}, beyond +-90; in a geographic CRS x must be the "
            "longitude and y the latitude (are they swapped?)"
        )
    return lon, lat


def _ecef(lon: np.ndarray, lat: np.ndarray, geod: Any) -> np.ndarray:
    """Earth-centred coordinates (m) of surface points (height 0) on ``geod``'s ellipsoid."""
    lam, phi = np.radians(lon), np.radians(lat)
    sin_phi, cos_phi = np.sin(phi), np.cos(phi)
    e2 = float(geod.es)
    n = float(geod.a) / np.sqrt(1.0 - e2 * sin_phi * sin_phi)
    return np.column_stack([n * cos_phi * np.cos(lam), n * cos_phi * np.sin(lam), n * (1.0 - e2) * sin_phi])


def reach_geodesic(
    demand: Demand,
    sites: Sites,
    limit_m: float,
    *,
    ellipsoid: Any = None,
    chunk_rows: int = 100_000,
) -> Reach:
    """Coverage by the shortest distance on the ellipsoid.

    Demand and site coordinates are in their CRS: longitude/latitude when it
    is geographic, projected x/y otherwise (they are then converted to the
    CRS's geographic coordinates).  Distances are geodesics on the CRS's
    ellipsoid (or ``ellipsoid``) computed by :meth:`pyproj.Geod.inv`
    (Karney's algorithms, accurate to nanometres).  Coverage is inclusive:
    ``s12 <= limit_m``.

    Candidate pairs come from a k-d tree over earth-centred coordinates with
    radius ``limit_m``: the straight chord between two surface points is
    never longer than the geodesic between them, so no covered pair is
    missed, whether the pair straddles the antimeridian or a pole.

    Parameters
    ----------
    demand, sites : Demand, Sites
        In the same CRS (geographic or projected).
    limit_m : float
        Service distance in metres along the ellipsoid, > 0.
    ellipsoid : str or pyproj.Geod, optional
        An ellipsoid name known to pyproj (``"WGS84"``, ``"GRS80"``, ...) or
        a Geod; default: the CRS's ellipsoid.
    chunk_rows : int
        Demand rows measured at a time.

    Returns
    -------
    Reach
        CSR demand x sites, values = geodesic distances in metres, rule
        ``ServiceRule(Metric.GEODESIC, limit_m, "m")``.

    >>> import numpy as np
    >>> from geocover.values import Demand, Sites
    >>> d = Demand(np.array([[179.99, 0.0], [-179.99, 0.0], [0.0, 0.0]]), np.ones(3), crs="EPSG:4326")
    >>> s = Sites(np.array([[180.0, 0.0]]), crs="EPSG:4326")
    >>> r = reach_geodesic(d, s, 2000.0)   # 0.01 degree at the equator is about 1113 m
    >>> r.coverable.tolist(), [round(float(v), 3) for v in r.matrix.data]
    ([True, True, False], [1113.195, 1113.195])
    """
    from scipy.spatial import cKDTree

    _check_pair(demand, sites)
    limit = _check_limit(limit_m, "limit")
    _same_crs(demand, sites)
    chunk_rows = _check_count(chunk_rows, "chunk_rows")
    crs = demand.crs if demand.crs is not None else sites.crs
    geod = _geod_for(crs, ellipsoid)
    rule = ServiceRule(Metric.GEODESIC, limit, "m")
    n, m = len(demand), len(sites)
    if n == 0 or m == 0:
        return Reach.from_matrix(_empty_csr(n, m), demand, sites, rule)
    dlon, dlat = _to_lonlat(demand.xy, crs, "demand")
    slon, slat = _to_lonlat(sites.xy, crs, "sites")
    site_tree = cKDTree(_ecef(slon, slat, geod))
    # chord <= geodesic; pad for the rounding of the earth-centred coordinates (~1e-9 m at 6.4e6 m)
    radius = limit * (1.0 + 1e-12) + 1e-6
    rows_parts, cols_parts, vals_parts = [], [], []
    for a, b in _chunk_bounds(n, chunk_rows):
        chunk_tree = cKDTree(_ecef(dlon[a:b], dlat[a:b], geod))
        cand = chunk_tree.sparse_distance_matrix(site_tree, radius, output_type="ndarray")
        if len(cand) == 0:
            continue
        i = cand["i"].astype(np.int64)
        j = cand["j"].astype(np.int64)
        _, _, s12 = geod.inv(dlon[a:b][i], dlat[a:b][i], slon[j], slat[j])
        s12 = np.asarray(s12, dtype=np.float64)
        keep = s12 <= limit
        rows_parts.append(i[keep] + a)
        cols_parts.append(j[keep])
        vals_parts.append(s12[keep])
    if not rows_parts:
        return Reach.from_matrix(_empty_csr(n, m), demand, sites, rule)
    return Reach.from_pairs(
        np.concatenate(rows_parts), np.concatenate(cols_parts), np.concatenate(vals_parts), demand, sites, rule
    )
