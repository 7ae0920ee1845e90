"""Road travel-time coverage: a graph from line layers, snapping, bounded Dijkstra.

How a time is made
------------------
* **Graph.**  Every straight segment of every road line is an edge; lines
  that share a vertex share a node (coordinates must match exactly).  With
  ``split_crossings=True`` lines are also cut wherever they cross.  An
  edge's time is its length over its speed (a speed field, or a road-class
  field looked up in a speed table the user can override).  One-way roads
  are honoured when a direction field is given.
* **Snapping.**  Demand points and sites are snapped to the nearest point of
  the nearest segment (not the nearest vertex) within ``max_snap_m``; the
  off-road leg is timed at ``offroad_speed_kmh``.  Points farther than
  ``max_snap_m`` from every road are *unsnapped*: they get no coverage and
  are listed in ``reach.notes``.  A point whose nearest road point is a
  node stands on that node, whatever the direction of its segment.
* **Times.**  From each site, Dijkstra bounded by the limit
  (:func:`scipy.sparse.csgraph.dijkstra` with ``limit``) runs from a virtual
  node on the site's segment that leads to the segment's end(s) the site may
  drive to.  A demand point's time is ``site off-road leg + min over its
  segment's ends (end time + partial-segment time) + demand off-road leg``;
  a demand point on the site's own segment may also be reached directly
  along it (respecting one-way).  Coverage is inclusive: ``time <= limit``.
  Big jobs share the sites' searches among forked processes (``workers``);
  the times are the same to the bit whatever the count.
  There is no off-road short cut between two points away from the roads.
* **Turn penalty.**  ``turn_penalty_s`` is added each time a route passes
  through an intersection (a node where three or more segments meet); shape
  vertices inside a road cost nothing.  Starting or ending at a node is not
  passing through it.
* **Parts.**  Weakly connected parts of the network are counted and the
  demand weight snapped to each is reported in ``reach.notes["components"]``.

>>> import geopandas as gpd, numpy as np
>>> from shapely import LineString
>>> from geocover.values import Demand, Sites
>>> roads = gpd.GeoDataFrame({"kmh": [36.0]}, geometry=[LineString([(0, 0), (1000, 0)])], crs="EPSG:32633")
>>> d = Demand(np.array([[600.0, 0.0], [900.0, 0.0]]), np.ones(2), crs="EPSG:32633")
>>> s = Sites(np.array([[0.0, 0.0]]), crs="EPSG:32633")
>>> r = reach_network(d, s, roads, 60.0, speed_field="kmh")   # 10 m/s: 600 m in 60 s
>>> r.matrix.toarray().ravel().tolist()
[60.0, 0.0]
"""

from __future__ import annotations

import logging
import math
import multiprocessing as mp
import os
import pickle
import sys
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Iterator, Mapping

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components, dijkstra
from scipy.spatial import cKDTree

from .crs import require_projected
from .errors import CRSError, InputError, LayerError, ParameterError
from .values import Demand, Metric, Reach, ServiceRule, Sites

if TYPE_CHECKING:
    import geopandas as gpd

__all__ = [
    "DEFAULT_SPEEDS_KMH",
    "RoadNetwork",
    "Snap",
    "build_network",
    "reach_network",
    "network_service_areas",
]

logger = logging.getLogger(__name__)

#: Default speeds (km/h) by road class, for a ``class_field``; override any of them with ``speed_table``.
#: The class names follow the OpenStreetMap ``highway`` vocabulary; the speeds are typical
#: free-flow urban/rural values (common practice), not a standard.
DEFAULT_SPEEDS_KMH: Mapping[str, float] = {
    "motorway": 100.0,
    "trunk": 80.0,
    "primary": 60.0,
    "secondary": 50.0,
    "tertiary": 40.0,
    "unclassified": 40.0,
    "residential": 30.0,
    "living_street": 10.0,
    "service": 20.0,
    "track": 15.0,
}

_FORWARD = {"1", "yes", "true", "forward", "y", "t"}
_BACKWARD = {"-1", "reverse", "backward", "back"}
_BOTH = {"0", "no", "false", "both", "n", "f", "", "none", "nan"}


# --------------------------------------------------------------------------- the graph


@dataclass(frozen=True, eq=False)
class Snap:
    """Where points meet the network.

    ``segment`` is the snapped segment (-1 when unsnapped), ``t`` the
    fraction along it from its first end, ``distance`` the off-road
    distance in metres and ``xy`` the snapped point.
    """

    segment: np.ndarray
    t: np.ndarray
    distance: np.ndarray
    xy: np.ndarray

    @property
    def snapped(self) -> np.ndarray:
        return self.segment >= 0


_SNAP_CHUNK = 16384  # points snapped at a time


@dataclass(frozen=True, eq=False)
class RoadNetwork:
    """A directed road graph made of straight segments.

    ``seg_u``/``seg_v`` are each segment's ends in digitised order,
    ``forward``/``backward`` whether it may be driven u->v / v->u,
    ``seg_time`` its full travel time (s), ``graph`` the directed CSR
    adjacency of node-to-node times including the intersection penalty,
    ``component`` the weakly connected part of each node.
    """

    node_xy: np.ndarray
    seg_u: np.ndarray
    seg_v: np.ndarray
    seg_length: np.ndarray
    seg_time: np.ndarray
    forward: np.ndarray
    backward: np.ndarray
    seg_feature: np.ndarray
    intersection: np.ndarray
    turn_penalty_s: float
    graph: sp.csr_matrix
    component: np.ndarray
    n_components: int
    crs: str | None = None
    _cache: dict = field(default_factory=dict, repr=False)

    @property
    def n_nodes(self) -> int:
        return len(self.node_xy)

    @property
    def n_segments(self) -> int:
        return len(self.seg_u)

    def penalty(self, nodes: np.ndarray) -> np.ndarray:
        """Penalty for passing through ``nodes`` (0 at non-intersections)."""
        return np.where(self.intersection[nodes], self.turn_penalty_s, 0.0)

    def snap(self, xy: np.ndarray, max_snap_m: float, workers: int = 1) -> Snap:
        """Snap points to the nearest point of the nearest segment within ``max_snap_m``.

        ``workers`` threads share the index queries (scipy's KD-tree releases the GIL).

        Segments are indexed by the midpoints of pieces no longer than about
        twice the median segment length.  A piece is no nearer than its
        midpoint less the longest half-piece, so once the nearest of a
        point's candidate pieces is nearer than that for every piece left
        out, it is the nearest of all; points where this does not hold yet
        get more candidates.
        """
        xy = np.asarray(xy, dtype=np.float64).reshape(-1, 2)
        k = len(xy)
        seg = np.full(k, -1, dtype=np.int64)
        t = np.zeros(k)
        dist = np.full(k, np.inf)
        out = np.full((k, 2), np.nan)
        if k == 0 or self.n_segments == 0:
            return Snap(seg, t, dist, out)
        index = self._cache.get("index")
        if index is None:
            piece_len = max(2.0 * float(np.median(self.seg_length)), 1e-9)
            n_pieces = np.maximum(np.ceil(self.seg_length / piece_len), 1).astype(np.int64)
            parent = np.repeat(np.arange(self.n_segments), n_pieces)
            first = np.cumsum(n_pieces) - n_pieces
            j = np.arange(len(parent)) - np.repeat(first, n_pieces)
            f0 = j / n_pieces[parent]
            f1 = (j + 1) / n_pieces[parent]
            a, b = self.node_xy[self.seg_u[parent]], self.node_xy[self.seg_v[parent]]
            pa = a + f0[:, None] * (b - a)
            pb = a + f1[:, None] * (b - a)
            ab = pb - pa
            half = 0.5 * float(np.max(np.hypot(*ab.T)))
            len2 = ab[:, 0] * ab[:, 0] + ab[:, 1] * ab[:, 1]
            # piece start, direction and squared length as separate contiguous columns for the gathers;
            # the tree built by midpoint splits (a third of the build time, queries as fast)
            tree = cKDTree(0.5 * (pa + pb), balanced_tree=False, compact_nodes=False)
            index = (tree, parent, f0, f1, pa[:, 0].copy(), pa[:, 1].copy(),
                     ab[:, 0].copy(), ab[:, 1].copy(), np.where(len2 > 0, len2, 1.0), half)
            self._cache["index"] = index
        tree, parent, f0, f1 = index[:4]
        half = index[-1]
        n_p = len(parent)
        # queried in strips across the map: neighbouring queries walk the same tree nodes (about 30 % faster)
        rows = np.lexsort((xy[:, 0], np.floor(xy[:, 1] / (8.0 * half + 1e-9))))
        best_p = np.zeros(k, dtype=np.int64)
        best_t = np.zeros(k)
        best_d = np.full(k, np.inf)
        kk = 0
        for want in (8, 32):
            if len(rows) == 0 or kk >= n_p:
                break
            kk = min(want, n_p)
            # in chunks, so that the candidates' temporaries stay small and are reused (fresh memory is slow)
            left = []
            for at in range(0, len(rows), _SNAP_CHUNK):
                part = rows[at : at + _SNAP_CHUNK]
                d_mid, cand = tree.query(xy[part], k=kk, workers=workers)
                d_mid, cand = d_mid.reshape(len(part), kk), cand.reshape(len(part), kk)
                best_p[part], best_t[part], best_d[part] = self._nearest_of(xy[part], cand)
                # a piece left out has its midpoint at least d_mid[:, -1] away, so it is at least that less half
                left.append(part[d_mid[:, -1] - half <= best_d[part]])
            rows = np.concatenate(left)
        if len(rows) and kk < n_p:  # rare: many pieces about as near; take every one that could be nearer
            lists = tree.query_ball_point(xy[rows], r=(best_d[rows] + half) * (1 + 1e-12) + 1e-9, workers=workers)
            for row, ids in zip(rows, lists):
                p_, t_, d_ = self._nearest_of(xy[row : row + 1], np.asarray(ids, dtype=np.int64)[None, :])
                best_p[row], best_t[row], best_d[row] = p_[0], t_[0], d_[0]
        ok = best_d <= max_snap_m
        pc = best_p[ok]
        seg[ok] = parent[pc]
        t[ok] = f0[pc] + best_t[ok] * (f1[pc] - f0[pc])
        dist[ok] = best_d[ok]
        a, b = self.node_xy[self.seg_u[seg[ok]]], self.node_xy[self.seg_v[seg[ok]]]
        out[ok] = a + t[ok][:, None] * (b - a)
        return Snap(seg, t, dist, out)

    def _nearest_of(self, xy: np.ndarray, cand: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The nearest of the candidate pieces ``cand`` (rows per point) and the position on it."""
        _, parent, _, _, ax, ay, dx, dy, len2, _ = self._cache["index"]
        valid = cand < len(parent)
        c = np.where(valid, cand, 0)
        ux, uy = dx[c], dy[c]
        rx = xy[:, 0:1] - ax[c]
        ry = xy[:, 1:2] - ay[c]
        tt = (rx * ux + ry * uy) / len2[c]
        np.clip(tt, 0.0, 1.0, out=tt)
        ex = rx - tt * ux
        ey = ry - tt * uy
        d2 = ex * ex + ey * ey
        d2[~valid] = np.inf
        col = np.argmin(d2, axis=1)
        rows = np.arange(len(xy))
        return c[rows, col], tt[rows, col], np.sqrt(d2[rows, col])


def _direction_codes(values: Any, field_name: str) -> np.ndarray:
    out = np.zeros(len(values), dtype=np.int8)
    bad: set[str] = set()
    for i, value in enumerate(values):
        if value is None or (isinstance(value, float) and math.isnan(value)):
            continue
        if isinstance(value, (bool, np.bool_)):
            out[i] = 1 if value else 0
            continue
        text = str(value).strip().lower()
        if text.endswith(".0"):
            text = text[:-2]
        if text in _FORWARD:
            out[i] = 1
        elif text in _BACKWARD:
            out[i] = -1
        elif text not in _BOTH:
            bad.add(str(value))
    if bad:
        raise LayerError(
            f"roads: field {field_name!r} has direction value(s) {sorted(bad)[:5]} that are not understood; "
            "use yes/1/true/forward (one-way along the line's drawing direction), -1/reverse/backward "
            "(one-way against it) or no/0/false/both (two-way)"
        )
    return out


def _feature_speeds(
    frame: "gpd.GeoDataFrame", speed_field: str | None, class_field: str | None, speed_table: Mapping[str, float] | None
) -> np.ndarray:
    columns = [c for c in frame.columns if c != frame.geometry.name]
    if speed_field is not None:
        if speed_field not in frame.columns:
            raise LayerError(f"roads: there is no field {speed_field!r} for speed_field; the fields are: {', '.join(map(str, columns))}")
        try:
            speeds = np.asarray(frame[speed_field], dtype=np.float64)
        except (TypeError, ValueError):
            raise LayerError(f"roads: field {speed_field!r} must hold speeds in km/h (numbers)") from None
        bad = np.flatnonzero(~np.isfinite(speeds) | (speeds <= 0))
        if len(bad):
            raise LayerError(
                f"roads: field {speed_field!r} has {len(bad)} missing, zero or negative speed(s) (first at row "
                f"{int(bad[0])}: {speeds[bad[0]]}); fill them in km/h or remove those roads"
            )
        return speeds
    if class_field is None:
        raise ParameterError(
            "reach_network: give speed_field (km/h per road) or class_field (a road class looked up in speed_table)",
            "speed_field",
        )
    if class_field not in frame.columns:
        raise LayerError(f"roads: there is no field {class_field!r} for class_field; the fields are: {', '.join(map(str, columns))}")
    table = {str(k): float(v) for k, v in DEFAULT_SPEEDS_KMH.items()}
    for k, v in (speed_table or {}).items():
        try:
            value = float(v)
        except (TypeError, ValueError):
            raise ParameterError(f"speed_table: the speed for {k!r} must be a number of km/h, got {v!r}", "speed_table") from None
        if not (math.isfinite(value) and value > 0):
            raise ParameterError(f"speed_table: the speed for {k!r} must be positive, got {v!r}", "speed_table")
        table[str(k)] = value
    classes = [str(c) for c in frame[class_field]]
    missing = sorted({c for c in classes if c not in table})
    if missing:
        raise LayerError(
            f"roads: road class(es) {missing[:8]} in field {class_field!r} have no speed; add them to speed_table "
            f"(km/h), e.g. speed_table={{{missing[0]!r}: 30}}"
        )
    return np.array([table[c] for c in classes], dtype=np.float64)


def _split_at_crossings(lines: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Cut lines wherever they cross; returns the pieces and the line each came from (drawing order kept)."""
    import shapely

    noded = shapely.get_parts(shapely.union_all(lines))
    tree = shapely.STRtree(lines)
    mids = shapely.line_interpolate_point(noded, 0.5, normalized=True)
    pairs = tree.query(mids, predicate="dwithin", distance=1e-7)
    # first candidate line per piece whose geometry really carries the piece
    order = np.lexsort((pairs[1], pairs[0]))
    pairs = pairs[:, order]
    first = np.unique(pairs[0], return_index=True)[1]
    owner = np.full(len(noded), -1, dtype=np.int64)
    owner[pairs[0, first]] = pairs[1, first]
    keep = owner >= 0
    noded, owner = noded[keep], owner[keep]
    start = shapely.line_locate_point(lines[owner], shapely.get_point(noded, 0))
    end = shapely.line_locate_point(lines[owner], shapely.get_point(noded, -1))
    flip = start > end
    if flip.any():
        noded[flip] = shapely.reverse(noded[flip])
    return noded, owner


def _line_parts(lines: np.ndarray, multi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Single lines of the features in order, and the feature each came from; only multi-lines are taken apart."""
    import shapely

    if not multi.any():  # taking a LineString "apart" would copy it for nothing
        return lines, np.arange(len(lines))
    pieces, of = shapely.get_parts(lines[multi], return_index=True)
    count = np.ones(len(lines), dtype=np.int64)
    count[multi] = np.bincount(of, minlength=int(multi.sum()))
    part_idx = np.repeat(np.arange(len(lines)), count)
    parts = np.empty(len(part_idx), dtype=object)
    from_multi = multi[part_idx]
    parts[~from_multi] = lines[~multi]
    parts[from_multi] = pieces
    return parts, part_idx


def _check_penalty(turn_penalty_s: Any) -> float:
    try:
        penalty = float(turn_penalty_s)
    except (TypeError, ValueError):
        penalty = math.nan
    if not (math.isfinite(penalty) and penalty >= 0):
        raise ParameterError(f"turn_penalty_s: must be zero or more seconds, got {turn_penalty_s!r}", "turn_penalty_s")
    return penalty


def build_network(
    roads: "gpd.GeoDataFrame",
    *,
    speed_field: str | None = None,
    class_field: str | None = None,
    speed_table: Mapping[str, float] | None = None,
    oneway_field: str | None = None,
    turn_penalty_s: float = 0.0,
    split_crossings: bool = False,
) -> RoadNetwork:
    """A :class:`RoadNetwork` from a line layer already in the working CRS.

    Parameters
    ----------
    roads : GeoDataFrame
        LineString / MultiLineString features in a projected CRS (metres).
    speed_field, class_field, speed_table, oneway_field, turn_penalty_s, split_crossings
        See :func:`reach_network`.
    """
    import shapely

    if roads.crs is not None and roads.crs.is_geographic:
        raise CRSError("roads: the layer is in a geographic CRS; reproject it to the projected working CRS first")
    penalty = _check_penalty(turn_penalty_s)
    geoms = np.asarray(roads.geometry.values, dtype=object)
    present = ~shapely.is_missing(geoms) & ~shapely.is_empty(geoms)  # (None is neither empty nor typed)
    if (~present).any():
        logger.warning("roads: %d feature(s) without geometry are skipped", int((~present).sum()))
    kinds = shapely.get_type_id(geoms)
    wrong = present & ~np.isin(kinds, [1, 5])  # LineString, MultiLineString
    if wrong.any():
        first = int(np.flatnonzero(wrong)[0])
        raise LayerError(
            f"roads: feature {first} is a {geoms[first].geom_type}; the road layer must hold lines "
            "(LineString or MultiLineString)"
        )
    speeds = _feature_speeds(roads, speed_field, class_field, speed_table)
    if oneway_field is not None:
        if oneway_field not in roads.columns:
            raise LayerError(f"roads: there is no field {oneway_field!r} for oneway_field")
        direction = _direction_codes(list(roads[oneway_field]), oneway_field)
    else:
        direction = np.zeros(len(roads), dtype=np.int8)
    rows = np.flatnonzero(present)
    parts, part_idx = _line_parts(geoms[rows], kinds[rows] == 5)
    part_feature = rows[part_idx]
    if split_crossings and len(parts):
        parts, owner = _split_at_crossings(parts)
        part_feature = part_feature[owner]
    coords, line_of = shapely.get_coordinates(parts, return_index=True)
    same = line_of[1:] == line_of[:-1]
    a_idx = np.flatnonzero(same)
    pa, pb = coords[a_idx], coords[a_idx + 1]
    length = np.hypot(*(pb - pa).T)
    nonzero = length > 0
    a_idx, length = a_idx[nonzero], length[nonzero]
    seg_feature = part_feature[line_of[a_idx]]
    # nodes: exactly shared coordinates
    order = np.lexsort((coords[:, 1], coords[:, 0]))
    sc = coords[order]
    new_node = np.ones(len(sc), dtype=bool)
    new_node[1:] = (sc[1:, 0] != sc[:-1, 0]) | (sc[1:, 1] != sc[:-1, 1])
    uniq = sc[new_node]
    inverse = np.empty(len(coords), dtype=np.int64)
    inverse[order] = np.cumsum(new_node) - 1
    seg_u, seg_v = inverse[a_idx].astype(np.int64), inverse[a_idx + 1].astype(np.int64)
    seg_time = length / (speeds[seg_feature] / 3.6)
    code = direction[seg_feature]
    forward, backward = code >= 0, code <= 0
    n = len(uniq)
    # intersections: three or more distinct neighbouring nodes
    lo_end, hi_end = np.minimum(seg_u, seg_v), np.maximum(seg_u, seg_v)
    pair_key = np.sort(lo_end * max(n, 1) + hi_end)  # distinct node pairs (a sort and a compare: faster than np.unique)
    pair_key = pair_key[np.r_[True, pair_key[1:] != pair_key[:-1]]] if len(pair_key) else pair_key
    degree = np.bincount(np.concatenate([pair_key // max(n, 1), pair_key % max(n, 1)]), minlength=n)
    intersection = degree >= 3
    tail = np.concatenate([seg_u[forward], seg_v[backward]])
    head = np.concatenate([seg_v[forward], seg_u[backward]])
    weight = np.concatenate([seg_time[forward], seg_time[backward]])
    weight = weight + np.where(intersection[tail], penalty, 0.0)
    graph = _min_csr(tail, head, weight, n)
    n_comp, labels = connected_components(graph, directed=True, connection="weak") if n else (0, np.zeros(0, np.int64))
    logger.info("road network: %d nodes, %d segments, %d part(s)", n, len(seg_u), n_comp)
    return RoadNetwork(
        node_xy=uniq,
        seg_u=seg_u,
        seg_v=seg_v,
        seg_length=length,
        seg_time=seg_time,
        forward=forward,
        backward=backward,
        seg_feature=seg_feature.astype(np.int64),
        intersection=intersection,
        turn_penalty_s=penalty,
        graph=graph,
        component=np.asarray(labels, dtype=np.int64),
        n_components=int(n_comp),
        crs=roads.crs.to_string() if roads.crs is not None else None,
    )


def _min_csr(tail: np.ndarray, head: np.ndarray, weight: np.ndarray, n: int) -> sp.csr_matrix:
    """CSR adjacency keeping the smallest weight of parallel edges (and explicit zeros)."""
    return sp.csr_matrix(_min_rows(tail, head, weight, n)[::-1], shape=(n, n))


def _min_rows(tail: np.ndarray, head: np.ndarray, weight: np.ndarray, rows: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(indptr, indices, data)`` of ``rows`` CSR rows, keeping the smallest weight of parallel edges."""
    # one integer key per (tail, head): a stable sort of it and a least weight per run of equal keys
    # (parallel edges are rare) cost about a third of a lexsort on three keys
    width = int(head.max()) + 1 if len(head) else 1
    key = tail * width + head
    order = np.argsort(key, kind="stable")
    key = key[order]
    starts = np.flatnonzero(np.r_[True, key[1:] != key[:-1]]) if len(key) else np.zeros(0, dtype=np.int64)
    weight = weight[order]
    if len(starts) < len(key):
        weight = np.minimum.reduceat(weight, starts)
    tail, head = tail[order[starts]], head[order[starts]]
    indptr = np.zeros(rows + 1, dtype=np.int64)
    np.cumsum(np.bincount(tail, minlength=rows), out=indptr[1:])
    return indptr, head, weight


# --------------------------------------------------------------------------- travel times


def _at_node(net: RoadNetwork, snap: Snap, idx: np.ndarray) -> np.ndarray:
    """The node each snapped point stands on (t = 0 or 1 on its segment), -1 when it is inside a segment."""
    seg, t = snap.segment[idx], snap.t[idx]
    return np.where(t == 0.0, net.seg_u[seg], np.where(t == 1.0, net.seg_v[seg], -1))


def _legs(net: RoadNetwork, snap: Snap, idx: np.ndarray) -> tuple[np.ndarray, ...]:
    """Ends of each snapped point's segment, the time from each end to the point (inf if not allowed)
    and the intersection penalty included in that time (to be waived when the route starts at that end)."""
    seg = snap.segment[idx]
    u, v = net.seg_u[seg], net.seg_v[seg]
    full = net.seg_time[seg]
    t = snap.t[idx]
    # a point snapped onto an end node (t = 0 or 1) is at that node, whatever the segment's direction,
    # and ending there is not passing through it: no penalty
    pen_u = np.where(t == 0.0, 0.0, net.penalty(u))
    pen_v = np.where(t == 1.0, 0.0, net.penalty(v))
    from_u = np.where(net.forward[seg] | (t == 0.0), t * full + pen_u, np.inf)
    from_v = np.where(net.backward[seg] | (t == 1.0), (1.0 - t) * full + pen_v, np.inf)
    return u, v, from_u, from_v, pen_u, pen_v


def _source_graph(net: RoadNetwork, snap: Snap, idx: np.ndarray) -> sp.csr_matrix:
    """The road graph plus one virtual source node per snapped site (no edges into it).

    A site standing on a node leaves it without that node's intersection penalty
    (starting at a node is not passing through it): its source also gets the
    node's out-edges at their time without the penalty.
    """
    n = net.n_nodes
    seg = snap.segment[idx]
    t = snap.t[idx]
    full = net.seg_time[seg]
    k = len(idx)
    src = n + np.arange(k)
    to_u = net.backward[seg] | (t == 0.0)  # leaving the site towards u means driving v -> u (or standing on u)
    to_v = net.forward[seg] | (t == 1.0)
    # out-edges of the nodes the sites stand on, re-tailed at the site's source, penalty taken off
    node = _at_node(net, snap, idx)
    on = np.flatnonzero(node >= 0)
    ptr = net.graph.indptr
    cnt = ptr[node[on] + 1] - ptr[node[on]]
    first = np.cumsum(cnt) - cnt
    pos = np.repeat(ptr[node[on]] - first, cnt) + np.arange(int(cnt.sum()))
    out_tail = np.repeat(src[on], cnt)
    out_head = net.graph.indices[pos]
    out_w = net.graph.data[pos] - np.repeat(net.penalty(node[on]), cnt)
    # the road graph's rows stay as they are; only the k source rows are built (and deduplicated)
    tail = np.concatenate([np.flatnonzero(to_u), np.flatnonzero(to_v), out_tail - n])
    head = np.concatenate([net.seg_u[seg][to_u], net.seg_v[seg][to_v], out_head])
    weight = np.concatenate([(t * full)[to_u], ((1.0 - t) * full)[to_v], out_w])
    s_ptr, s_head, s_weight = _min_rows(tail.astype(np.int64), head.astype(np.int64), weight, k)
    g = net.graph
    indptr = np.concatenate([g.indptr.astype(np.int64), g.indptr[-1] + s_ptr[1:]])
    return sp.csr_matrix((np.concatenate([g.data, s_weight]), np.concatenate([g.indices, s_head]), indptr), shape=(n + k, n + k))


def _spans(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """The integers ``lo[k] .. hi[k] - 1`` of every span, concatenated in order."""
    cnt = hi - lo
    n = int(cnt.sum())
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    return np.repeat(lo - (np.cumsum(cnt) - cnt), cnt) + np.arange(n)


def _ranges(ptr: np.ndarray, keys: np.ndarray) -> np.ndarray:
    """The positions ``ptr[k] .. ptr[k + 1] - 1`` of every key in ``keys``, concatenated in order."""
    return _spans(ptr[keys], ptr[keys + 1])


def _runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Starts and stops (exclusive) of the runs of True in a boolean vector."""
    edges = np.flatnonzero(np.diff(mask, prepend=False, append=False))
    return edges[0::2], edges[1::2]


class _PairBuffer:
    """Covering pairs written straight into buffers that grow to the size the sites so far predict.

    Touching fresh memory is slow, so there are no per-site pieces and no
    final concatenation; growing reallocates (``mremap`` for big blocks).
    """

    def __init__(self, row_dtype: Any, most: int, sites: int) -> None:
        self.most, self.sites = most, max(sites, 1)
        cap = min(most, 1 << 20)
        self.rows = np.empty(cap, dtype=row_dtype)
        self.vals = np.empty(cap)
        self.fill = 0
        self.done = 0

    def add(self, rows_s: np.ndarray, pick: np.ndarray, total: np.ndarray, ok: np.ndarray) -> int:
        """Append ``rows_s[pick]`` with times ``total[ok]`` (one site's pairs); returns how many."""
        c, fill = len(ok), self.fill
        self.done += 1
        if fill + c > len(self.rows):
            cap = min(self.most, max(2 * len(self.rows), int(1.1 * (fill + c) / self.done * self.sites), fill + c))
            self.rows.resize(cap, refcheck=False)
            self.vals.resize(cap, refcheck=False)
        np.take(rows_s, pick, out=self.rows[fill : fill + c])
        np.take(total, ok, out=self.vals[fill : fill + c])
        self.fill = fill + c
        return c


@dataclass(frozen=True)
class _DemandIndex:
    """Snapped demand listed by the ends of its segments, for turning a site's node times into pairs.

    Demand is listed by the first end of its segment (``du_s``, sorted, with
    ``u_ptr`` per node) and, through ``v_order``, by the other end
    (``v_ptr``); ``gu_s``/``gv_s`` are the times from each end to the point,
    its off-road leg included, and ``pu_s``/``pv_s`` the intersection
    penalties inside them; ``rows_s`` the demand rows.
    """

    du_s: np.ndarray
    dv_s: np.ndarray
    gu_s: np.ndarray
    gv_s: np.ndarray
    pu_s: np.ndarray
    pv_s: np.ndarray
    rows_s: np.ndarray
    u_ptr: np.ndarray
    v_ptr: np.ndarray
    v_order: np.ndarray
    du_v: np.ndarray

    @property
    def n(self) -> int:
        return len(self.rows_s)

    @classmethod
    def build(cls, net: RoadNetwork, dsnap: Snap, d_off: np.ndarray, row_dtype: Any) -> "_DemandIndex":
        n_nodes = net.n_nodes
        d_idx = np.flatnonzero(dsnap.snapped)
        du, dv, d_from_u, d_from_v, d_pen_u, d_pen_v = _legs(net, dsnap, d_idx)
        order = np.argsort(du, kind="stable")
        du_s, dv_s = du[order], dv[order]
        off_s = d_off[d_idx][order]
        u_ptr = np.zeros(n_nodes + 1, dtype=np.int64)
        np.cumsum(np.bincount(du_s, minlength=n_nodes), out=u_ptr[1:])
        v_order = np.argsort(dv_s, kind="stable")
        v_ptr = np.zeros(n_nodes + 1, dtype=np.int64)
        np.cumsum(np.bincount(dv_s, minlength=n_nodes), out=v_ptr[1:])
        return cls(
            du_s, dv_s, d_from_u[order] + off_s, d_from_v[order] + off_s, d_pen_u[order], d_pen_v[order],
            d_idx[order].astype(row_dtype), u_ptr, v_ptr, v_order, du_s[v_order],
        )


# Work below which the site searches run in this process: forking costs a few
# milliseconds, a search of a 10,000-node graph about 0.1 ms.
_FORK_MIN_WORK = 5_000_000  # sites x graph nodes
_MAX_AUTO_WORKERS = 4


@dataclass(frozen=True)
class _SiteSearch:
    """Everything one site's bounded search needs, so that sites can be searched in any process.

    ``demand`` may come later than the rest (:meth:`with_demand`): a search
    needs only the graph, the pairs need the demand.
    """

    graph: sp.csr_matrix
    n_nodes: int
    limit: float
    budget: np.ndarray
    s_node: np.ndarray
    s_off: np.ndarray
    row_dtype: Any
    n_demand: int  # demand points in all (an upper bound of any site's pairs)
    demand: _DemandIndex | None = None

    def with_demand(self, demand: _DemandIndex) -> "_SiteSearch":
        return _SiteSearch(self.graph, self.n_nodes, self.limit, self.budget, self.s_node, self.s_off,
                           self.row_dtype, self.n_demand, demand)

    def reach(self, i: int) -> np.ndarray:
        """Node times of site ``i`` (inf beyond its budget)."""
        return dijkstra(self.graph, directed=True, indices=self.n_nodes + i, limit=float(self.budget[i]))[: self.n_nodes]

    def add_pairs(self, out: _PairBuffer, i: int, t: np.ndarray) -> int:
        """Append site ``i``'s covering pairs, from its node times ``t``, to ``out``; returns how many."""
        dem = self.demand
        assert dem is not None
        reached = t <= float(self.budget[i])
        # runs of consecutive reached nodes (nodes are numbered in coordinate order, so runs are long)
        first, stop = _runs(reached)
        if len(first) == 0:
            out.done += 1
            return 0
        # demand whose segment starts at a reached node, then that whose segment only ends at one
        at_v = _spans(dem.v_ptr[first], dem.v_ptr[stop])
        j = np.concatenate([_spans(dem.u_ptr[first], dem.u_ptr[stop]), dem.v_order[at_v[~reached[dem.du_v[at_v]]]]])
        du, dv = dem.du_s[j], dem.dv_s[j]
        via_u = t[du] + dem.gu_s[j]
        via_v = t[dv] + dem.gv_s[j]
        start = int(self.s_node[i])
        if start >= 0:
            via_u -= np.where(du == start, dem.pu_s[j], 0.0)
            via_v -= np.where(dv == start, dem.pv_s[j], 0.0)
        total = np.minimum(via_u, via_v, out=via_u)
        total += self.s_off[i]
        ok = np.flatnonzero(total <= self.limit)
        return out.add(dem.rows_s, j[ok], total, ok)

    def buffer(self, sites: int, at_most: int | None = None) -> _PairBuffer:
        """A pair buffer sized for about ``sites`` sites, of at most ``at_most`` (default: ``sites``)."""
        return _PairBuffer(self.row_dtype, max(self.n_demand, 1) * max(sites if at_most is None else at_most, 1), sites)

    def run(self, lo: int, hi: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Covering pairs of sites ``lo .. hi - 1`` (positions in the searched sites).

        Returns ``(rows, seconds, count)``: the demand rows of each site in
        turn (unordered within a site), their times, and how many each site has.
        """
        out, count = self.run_buffers(lo, hi)
        return out.rows[: out.fill], out.vals[: out.fill], count

    def run_buffers(self, lo: int, hi: int, out: _PairBuffer | None = None) -> tuple[_PairBuffer, np.ndarray]:
        """:meth:`run`, into (and returning) the buffer ``out`` (a new one by default), with the counts."""
        out = self.buffer(hi - lo) if out is None else out
        count = np.zeros(hi - lo, dtype=np.int64)
        for i in range(lo, hi):
            count[i - lo] = self.add_pairs(out, i, self.reach(i))
        return out, count


def _search_workers(workers: int | None, n_sites: int, n_nodes: int) -> int:
    """Processes for the site searches: ``workers`` when given, else one per CPU (at most 4) for big jobs on Linux."""
    if workers is not None:
        return max(1, min(int(workers), n_sites))
    if not sys.platform.startswith("linux") or n_sites * n_nodes < _FORK_MIN_WORK:
        return 1
    cpus = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    return max(1, min(cpus, _MAX_AUTO_WORKERS, n_sites // 16))


#: Peak bytes per covering pair of network coverage: the pairs as searched (int32 row + float64
#: time) and the finished relation (int32 column + float64 time) side by side while transposing.
NETWORK_BYTES_PER_PAIR = 24.0


def _estimate_pairs(search: _SiteSearch, sample: int = 32) -> int:
    """Covering pairs through the network, estimated from the searches of ``sample`` sites spread over
    the list (all of them, and exact, when there are no more): their mean times the number of sites."""
    m = len(search.budget)
    pick = np.unique(np.linspace(0, m - 1, min(sample, m)).round().astype(np.int64))
    out = search.buffer(1)
    found = 0
    for i in pick.tolist():
        found += search.add_pairs(out, i, search.reach(i))
        out.fill = out.done = 0
    return int(round(found / len(pick) * m))


def _vectored(io: Any, fd: int, arrays: list[np.ndarray], offset: int) -> int:
    """Move the bytes of the (contiguous) arrays, one after another, to ``fd`` (``os.pwritev``) or from it
    (``os.preadv``) at ``offset``, in as many calls as it takes; returns the end offset."""
    views = [memoryview(a).cast("B") for a in arrays if a.nbytes]
    while views:
        done = io(fd, views[:_IOV_MAX], offset)
        if done == 0:
            raise EOFError("network coverage: a search process handed back fewer bytes than it announced")
        offset += done
        while views and done >= len(views[0]):
            done -= len(views[0])
            views.pop(0)
        if views and done:
            views[0] = views[0][done:]
    return offset


def _pwrite_all(fd: int, arrays: list[np.ndarray], offset: int = 0) -> int:
    """Write the arrays' bytes one after another at ``offset``; returns the end offset."""
    return _vectored(os.pwritev, fd, arrays, offset)


def _pread_into(fd: int, arrays: list[np.ndarray], offset: int = 0) -> int:
    """Fill the arrays (contiguous, writable) from the bytes at ``offset``; returns the end offset."""
    return _vectored(os.preadv, fd, arrays, offset)


_IOV_MAX = 512


def _claim(claims: Any, size: int, front: bool) -> tuple[int, int] | None:
    """Take the next ``size`` sites of the shared range ``claims[0] .. claims[1] - 1``, from its front or back."""
    with claims.get_lock():
        lo, hi = claims[0], claims[1]
        if hi <= lo:
            return None
        if front:
            claims[0] = min(lo + size, hi)
            return lo, claims[0]
        claims[1] = max(hi - size, lo)
        return claims[1], hi


# a child's pairs end here in its memfd: written backwards, block by block, as its (descending) blocks are done
_ROWS_END, _VALS_END = 1 << 40, 1 << 41


def _blocks_down(lo: int, hi: int, block: int) -> Iterator[tuple[int, int]]:
    """``lo .. hi - 1`` in blocks of ``block`` sites, the last block first."""
    for top in range(hi, lo, -block):
        yield max(lo, top - block), top


def _search_child(conn: Any, out_fd: int, dem_fd: int, ready: Any, claims: Any, block: int,
                  search: _SiteSearch, lo: int, hi: int) -> None:  # pragma: no cover - forked child
    """Search sites of ``lo .. hi - 1`` in a forked child and hand their pairs back through ``out_fd``.

    With ``claims`` the child takes blocks from the back of the range it
    shares with the parent (which takes them from the front); without, it
    searches its whole range, also from the back.  Each block's pairs are
    written to the memfd once the block is done, below the previous
    block's (the pairs end at ``_ROWS_END`` and ``_VALS_END``), so that
    they end up in site order and only one block is ever held here.  The
    child starts before the demand is known: node times are kept (reached
    nodes only) until the parent has written the demand to ``dem_fd`` and
    set ``ready``.  The counts per site go at the start of the memfd.
    """
    try:
        parent = os.getppid()
        count = np.zeros(hi - lo, dtype=np.int64)
        out = search.buffer(block)
        itemsize = np.dtype(search.row_dtype).itemsize
        ends = [_ROWS_END, _VALS_END]
        held: list[tuple[int, int, list[tuple[np.ndarray, np.ndarray]]]] = []

        def flush() -> None:  # the block's pairs, below those written before
            c = out.fill
            ends[0] -= c * itemsize
            ends[1] -= c * 8
            _pwrite_all(out_fd, [out.rows[:c]], ends[0])
            _pwrite_all(out_fd, [out.vals[:c]], ends[1])
            out.fill = out.done = 0

        def take_demand() -> None:
            nonlocal search
            search = search.with_demand(_read_demand(dem_fd))
            scratch = np.full(search.n_nodes, np.inf)
            for a, _, kept in held:
                for i, (nodes, times) in enumerate(kept, a):
                    scratch[nodes] = times
                    count[i - lo] = search.add_pairs(out, i, scratch)
                    scratch[nodes] = np.inf
                flush()
            held.clear()

        spans = iter(lambda: _claim(claims, block, front=False), None) if claims is not None else _blocks_down(lo, hi, block)
        first = hi
        for a, b in spans:
            first = a
            if search.demand is None and ready.is_set():
                take_demand()
            if search.demand is None:
                kept = []
                for i in range(a, b):
                    t = search.reach(i)
                    nodes = np.flatnonzero(t <= float(search.budget[i]))
                    kept.append((nodes, t[nodes]))
                held.append((a, b, kept))
            else:
                for i in range(a, b):
                    count[i - lo] = search.add_pairs(out, i, search.reach(i))
                flush()
        while search.demand is None:
            if ready.wait(1.0):
                take_demand()
            elif os.getppid() != parent:
                return  # the parent is gone: nobody wants the pairs
        _pwrite_all(out_fd, [count[first - lo :]], 0)
        conn.send(("ok", first, (_ROWS_END - ends[0]) // itemsize, hi - first))
    except BaseException as exc:  # report, never leave the parent waiting
        try:
            conn.send(("error", repr(exc)))
        except BaseException:
            pass
    finally:
        conn.close()


def _write_demand(fd: int, demand: _DemandIndex) -> None:
    blob = pickle.dumps(demand, protocol=pickle.HIGHEST_PROTOCOL)
    _pwrite_all(fd, [np.array([len(blob)], dtype=np.int64), np.frombuffer(blob, dtype=np.uint8)], 0)


def _read_demand(fd: int) -> _DemandIndex:
    size = np.zeros(1, dtype=np.int64)
    _pread_into(fd, [size], 0)
    blob = bytearray(int(size[0]))
    _pread_into(fd, [np.frombuffer(blob, dtype=np.uint8)], 8)
    return pickle.loads(blob)


def _receive(conn: Any) -> tuple[int, int, int] | None:
    """``(first site, pairs, sites)`` a child searched, or None when it failed (the parent then does its share)."""
    try:
        message = conn.recv()
    except (EOFError, OSError) as exc:
        logger.warning("network coverage: a search process ended early (%r); searching its sites here", exc)
        return None
    if message[0] != "ok":
        logger.warning("network coverage: a search process failed (%s); searching its sites here", message[1])
        return None
    return int(message[1]), int(message[2]), int(message[3])


def _shares(budget: np.ndarray, workers: int) -> list[int]:
    """Cuts of the sites into ``workers`` contiguous shares of about equal work (an area growing with the budget squared)."""
    n = len(budget)
    work = np.cumsum(np.maximum(budget, 0.0) ** 2)
    cuts = [0, *np.searchsorted(work, work[-1] * np.arange(1, workers) / workers).tolist(), n]
    return np.maximum.accumulate(np.minimum(cuts, n)).tolist()


def _run_searches(
    search: _SiteSearch, workers: int, demand_side: Any
) -> tuple[_SiteSearch, np.ndarray, np.ndarray, np.ndarray]:
    """All sites' searches, in ``workers`` processes (this one included); pairs in site order.

    ``demand_side()`` makes the demand (a :class:`_DemandIndex`); with
    workers it runs here while forked children already search: they
    inherit the graph (nothing is pickled), keep their node times until the
    demand is handed to them, and hand their pairs back in shared memory
    (memfds).  The first child and this process share the first two shares
    of the sites, the child taking blocks from the back and this process
    from the front once its demand is made, so that the demand's cost is
    balanced out; the other children search a share each.  scipy's Dijkstra
    holds the GIL, so threads would not run in parallel.  A child that
    fails has its sites searched here, so the result never depends on the
    workers.

    Returns the search with its demand, and ``(rows, seconds, count)``.
    """
    n_sites = len(search.budget)
    if workers <= 1 or n_sites < 2 or "fork" not in mp.get_all_start_methods() or not hasattr(os, "memfd_create"):
        search = search.with_demand(demand_side())
        if search.demand.n == 0:  # type: ignore[union-attr]  # no demand on the network: nothing to search for
            return search, np.zeros(0, search.row_dtype), np.zeros(0), np.zeros(n_sites, dtype=np.int64)
        return (search, *search.run(0, n_sites))
    ctx = mp.get_context("fork")
    cuts = _shares(search.budget, workers)
    shared_end = cuts[2] if workers > 2 else n_sites
    claims = ctx.Array("q", [0, shared_end])
    ready = ctx.Event()
    block = max(1, min(8, shared_end // 32))
    dem_fd = os.memfd_create("geocover-demand", os.MFD_CLOEXEC)
    # (process, pipe, memfd, lo, hi, shared): the first child shares 0 .. shared_end with this process
    children: list[tuple[Any, Any, int, int, int, bool]] = []
    ranges = [(0, shared_end, True)] + [(lo, hi, False) for lo, hi in zip(cuts[2:-1], cuts[3:])]
    ok = False
    try:
        for lo, hi, shared in ranges:
            if hi <= lo:
                continue
            fd = os.memfd_create("geocover-search", os.MFD_CLOEXEC)
            try:
                recv, send = ctx.Pipe(duplex=False)
            except BaseException:
                os.close(fd)
                raise
            children.append((None, recv, fd, lo, hi, shared))
            proc = ctx.Process(target=_search_child, daemon=True,
                               args=(send, fd, dem_fd, ready, claims if shared else None, block, search, lo, hi))
            try:
                proc.start()
            finally:
                send.close()  # the child's end: this process keeps only the reading one
            children[-1] = (proc, recv, fd, lo, hi, shared)
        search = search.with_demand(demand_side())
        if search.demand.n == 0:  # type: ignore[union-attr]  # nothing to cover: the children are stopped, not waited for
            return search, np.zeros(0, search.row_dtype), np.zeros(0), np.zeros(n_sites, dtype=np.int64)
        _write_demand(dem_fd, search.demand)  # type: ignore[arg-type]
        ready.set()
        out = search.buffer(max(shared_end // 2, 1), shared_end)
        counts: list[np.ndarray] = []
        while (span := _claim(claims, block, front=True)) is not None:
            counts.append(search.run_buffers(*span, out=out)[1])
        meet = int(claims[0])
        got = [_receive(child[1]) for child in children]
        # a failed child's sites: from where the first child's claims began, or its whole share
        redo: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
        for c, ((_, _, _, lo, hi, shared), g) in enumerate(zip(children, got)):
            if g is None:
                first = meet if shared else lo
                redo[c] = search.run(first, hi)
                got[c] = (first, len(redo[c][0]), hi - first)
        # this process's buffers grown in place (realloc moves big blocks by remapping, so the pairs
        # already there are not copied nor touched again), each child's pairs read once after them
        fill0 = out.fill
        total = fill0 + sum(g[1] for g in got)  # type: ignore[index]
        rows, vals = out.rows, out.vals
        del out
        rows.resize(total, refcheck=False)
        vals.resize(total, refcheck=False)
        count = np.empty(n_sites, dtype=np.int64)
        count[:meet] = np.concatenate(counts) if counts else np.zeros(0, np.int64)
        at = fill0
        for c, (_, _, fd, lo, hi, shared) in enumerate(children):
            first, fill, k = got[c]  # type: ignore[misc]
            if first + k != hi or (shared and first != meet):
                raise RuntimeError(f"network coverage: a search process handed back sites {first}..{first + k}, not ..{hi}")
            if c in redo:
                rows[at : at + fill], vals[at : at + fill], count[first:hi] = redo.pop(c)
            else:
                _pread_into(fd, [count[first:hi]], 0)
                _pread_into(fd, [rows[at : at + fill]], _ROWS_END - fill * rows.itemsize)
                _pread_into(fd, [vals[at : at + fill]], _VALS_END - fill * vals.itemsize)
            at += fill
        ok = True
    finally:  # also on Ctrl-C or a failed demand: no child is left searching
        for proc, recv, fd, *_ in children:
            recv.close()
            os.close(fd)
            if proc is not None and proc.is_alive():
                if ok:
                    proc.join(0.5)
                if proc.is_alive():
                    proc.kill()
                    proc.join(1)
        os.close(dem_fd)
    logger.debug("network coverage: %d sites searched in %d processes", n_sites, workers)
    return search, rows, vals, count


def _network_pairs(
    net: RoadNetwork,
    ssnap: Snap,
    s_off: np.ndarray,
    limit: float,
    demand: Any,
    n_demand: int,
    workers: int | None = None,
    memory_budget_gb: float | None = None,
) -> tuple[tuple[np.ndarray, np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray, np.ndarray], Snap, np.ndarray]:
    """Covering pairs through the network and along a site's own segment.

    ``demand()`` snaps the ``n_demand`` demand points, returning
    ``(snap, off-road seconds)``; it is called once, while forked
    processes already search from the sites when there are ``workers``.
    With ``memory_budget_gb``, the pairs are estimated from a sample of the
    sites' searches once the demand is snapped, and a relation that would
    not fit is refused then (see :func:`_estimate_pairs`).

    Returns ``((rows, colptr, seconds), (rows, cols, seconds), snap,
    off-road seconds)``: the first is a CSC pattern (demand rows of each
    site in turn, ``colptr`` of length ``m + 1``, rows unordered within a
    site), the second the direct legs along the site's own segment, to be
    merged by minimum.

    One bounded Dijkstra per site (exact limit: batching sources under one
    limit explores more and is slower).  Demand is kept sorted by the first
    end of its segment, so the demand met at the reached nodes is a set of
    contiguous runs and the gathers stay local.  The searches run in
    ``workers`` processes (see :func:`_search_workers`; the pairs are the
    same whatever the count).
    """
    n_nodes = net.n_nodes
    m = len(ssnap.segment)
    s_idx = np.flatnonzero(ssnap.snapped & (s_off <= limit))
    row_dtype = np.int32 if n_demand < 2**31 else np.int64
    made: dict[str, Any] = {}

    def demand_side() -> _DemandIndex:  # (while the children search: the direct legs too)
        made["snap"], made["off"] = demand()
        made["direct"] = _direct_legs(net, made["snap"], made["off"], ssnap, s_off, s_idx, limit)
        index = _DemandIndex.build(net, made["snap"], made["off"], row_dtype)
        if memory_budget_gb is not None and len(s_idx):
            from .coverage import check_memory

            pairs = _estimate_pairs(search.with_demand(index))
            check_memory(pairs, memory_budget_gb, n_demand, "network coverage", NETWORK_BYTES_PER_PAIR)
        return index

    if len(s_idx) == 0:
        demand_side()
        return (np.zeros(0, np.int32), np.zeros(m + 1, np.int64), np.zeros(0)), made["direct"], made["snap"], made["off"]
    s_node = _at_node(net, ssnap, s_idx)  # a route from a site standing on a node does not pay its penalty
    graph = _source_graph(net, ssnap, s_idx)
    budget = limit - s_off[s_idx]  # time left on the network for each site
    search = _SiteSearch(graph, n_nodes, limit, budget, s_node, s_off[s_idx], row_dtype, n_demand)
    n_workers = _search_workers(workers, len(s_idx), n_nodes)
    search, rows, vals, per_site = _run_searches(search, n_workers, demand_side)
    dsnap, d_off = made["snap"], made["off"]
    count = np.zeros(m, dtype=np.int64)
    count[s_idx] = per_site
    colptr = np.zeros(m + 1, dtype=np.int64)
    np.cumsum(count, out=colptr[1:])
    return (rows, colptr, vals), made["direct"], dsnap, d_off


def _direct_legs(
    net: RoadNetwork, dsnap: Snap, d_off: np.ndarray, ssnap: Snap, s_off: np.ndarray, s_idx: np.ndarray, limit: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(demand rows, sites, seconds)`` of the demand reached along a site's own segment (respecting one-way)."""
    empty = (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0))
    d_idx = np.flatnonzero(dsnap.snapped)
    dseg = dsnap.segment[d_idx]
    seg_order = np.argsort(dseg, kind="stable")
    seg_ptr = np.zeros(net.n_segments + 1, dtype=np.int64)
    np.cumsum(np.bincount(dseg, minlength=net.n_segments), out=seg_ptr[1:])
    direct = empty
    sseg = ssnap.segment[s_idx]
    cnt = seg_ptr[sseg + 1] - seg_ptr[sseg]
    if cnt.sum():
        rs = np.repeat(np.arange(len(s_idx)), cnt)
        dd = seg_order[_ranges(seg_ptr, sseg)]
        seg = sseg[rs]
        ts, td = ssnap.t[s_idx[rs]], dsnap.t[d_idx[dd]]
        full = net.seg_time[seg]
        ahead = np.where(net.forward[seg] & (td >= ts), (td - ts) * full, np.inf)
        behind = np.where(net.backward[seg] & (td <= ts), (ts - td) * full, np.inf)
        total = s_off[s_idx[rs]] + np.minimum(ahead, behind) + d_off[d_idx[dd]]
        ok = total <= limit
        direct = (d_idx[dd[ok]], s_idx[rs[ok]], total[ok])
    return direct


def _combine(n: int, m: int, net_pairs: tuple, direct: tuple) -> sp.csr_matrix:
    """Canonical CSR of the network pairs (a CSC, one entry per pair) merged with the direct legs by minimum."""
    rows, colptr, vals = net_pairs
    # the transpose of a CSC without repeated entries is a canonical CSR, whatever the order inside a column
    mat = sp.csc_matrix((vals, rows, colptr), shape=(n, m)).tocsr()
    mat.has_canonical_format = True
    d_rows, d_cols, d_vals = _min_pairs(*direct, m)
    if len(d_rows) == 0:
        return mat
    # look each direct pair up in its own row only
    ptr = mat.indptr.astype(np.int64)
    pos = _ranges(ptr, d_rows)
    owner = np.repeat(np.arange(len(d_rows)), ptr[d_rows + 1] - ptr[d_rows])
    hit = mat.indices[pos] == d_cols[owner]
    at = np.full(len(d_rows), -1, dtype=np.int64)
    at[owner[hit]] = pos[hit]
    found = at >= 0
    mat.data[at[found]] = np.minimum(mat.data[at[found]], d_vals[found])
    if (~found).any():
        extra = sp.csr_matrix((d_vals[~found], (d_rows[~found], d_cols[~found])), shape=(n, m))
        mat = (mat + extra).tocsr()  # disjoint patterns: the sum is the union
        mat.sort_indices()
    return mat


def _min_pairs(rows: np.ndarray, cols: np.ndarray, vals: np.ndarray, m: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Keep the smallest value of each (row, col) pair."""
    if len(rows) == 0:
        return rows, cols, vals
    key = rows.astype(np.int64) * max(m, 1) + cols
    order = np.lexsort((vals, key))
    key, vals = key[order], vals[order]
    first = np.ones(len(key), dtype=bool)
    first[1:] = key[1:] != key[:-1]
    return rows[order][first], cols[order][first], vals[first]


def _resolve_roads(roads: Any, crs: Any) -> "gpd.GeoDataFrame":
    from .layers import LayerRef, read_vector, to_crs

    try:
        import geopandas as gpd
    except ImportError:  # pragma: no cover - geopandas is a dependency
        raise InputError("roads: geopandas is needed to read the road layer") from None
    if isinstance(roads, gpd.GeoDataFrame):
        frame = roads
        if frame.crs is None:
            raise CRSError("roads: the road layer has no CRS; set one (frame.set_crs('EPSG:...'))")
    elif isinstance(roads, (str, LayerRef)) or hasattr(roads, "__fspath__"):
        frame = read_vector(roads if not hasattr(roads, "__fspath__") else str(roads), what="roads")
    else:
        raise InputError(f"roads: expected a path, 'path:layer', LayerRef or GeoDataFrame, got {type(roads).__name__}")
    if len(frame) == 0:
        raise LayerError("roads: the road layer has no features")
    return to_crs(frame, crs, "roads")


def _components_report(net: RoadNetwork, dsnap: Snap, demand: Demand, ssnap: Snap) -> dict[str, Any]:
    k = net.n_components
    d_comp = np.full(len(demand), -1, dtype=np.int64)
    ok = dsnap.snapped
    d_comp[ok] = net.component[net.seg_u[dsnap.segment[ok]]]
    s_comp = np.full(len(ssnap.segment), -1, dtype=np.int64)
    ok_s = ssnap.snapped
    s_comp[ok_s] = net.component[net.seg_u[ssnap.segment[ok_s]]]
    weight = np.bincount(d_comp[ok], weights=demand.weight[ok], minlength=k) if k else np.zeros(0)
    points = np.bincount(d_comp[ok], minlength=k) if k else np.zeros(0, np.int64)
    sites = np.bincount(s_comp[ok_s], minlength=k) if k else np.zeros(0, np.int64)
    nodes = np.bincount(net.component, minlength=k) if k else np.zeros(0, np.int64)
    return {
        "count": int(k),
        "nodes": nodes,
        "demand_weight": weight,
        "demand_points": points,
        "sites": sites,
        "demand_component": d_comp,
        "site_component": s_comp,
        "weight_without_site": float(weight[sites == 0].sum()) if k else 0.0,
    }


def reach_network(
    demand: Demand,
    sites: Sites,
    roads: Any,
    limit_s: float,
    *,
    speed_field: str | None = None,
    class_field: str | None = None,
    speed_table: Mapping[str, float] | None = None,
    oneway_field: str | None = None,
    offroad_speed_kmh: float = 5.0,
    max_snap_m: float = 500.0,
    turn_penalty_s: float = 0.0,
    split_crossings: bool = False,
    workers: int | None = None,
    memory_budget_gb: float | None = None,
) -> Reach:
    """Coverage by travel time on a road network (seconds, inclusive).

    Parameters
    ----------
    demand, sites : Demand, Sites
        In the same projected working CRS.
    roads : path, "path:layer", LayerRef or GeoDataFrame
        Road lines; reprojected to the demand's CRS when needed.
    limit_s : float
        Travel-time limit in seconds (e.g. 480 for 8 minutes), > 0.
    speed_field : str, optional
        Field with the speed of each road in km/h.
    class_field : str, optional
        Field with the road class, looked up in :data:`DEFAULT_SPEEDS_KMH`
        updated by ``speed_table`` (used when ``speed_field`` is not given).
    speed_table : mapping, optional
        Road class -> km/h, overriding or extending the defaults.
    oneway_field : str, optional
        Direction field: yes/1/true/forward = one-way along the drawing
        direction, -1/reverse/backward = against it, no/0/false/both or
        empty = two-way.  Without it every road is two-way.
    offroad_speed_kmh : float
        Speed of the off-road legs between a point and its snapped position.
    max_snap_m : float
        Points farther than this from every road are not snapped; they are
        reported in ``reach.notes`` and get no coverage.
    turn_penalty_s : float
        Seconds added per intersection passed through.
    split_crossings : bool
        Also cut lines where they cross without a shared vertex (for
        layers drawn without nodes at junctions; leave off where roads pass
        over each other on bridges).
    workers : int, optional
        Processes that share the per-site searches (forked; scipy's
        Dijkstra holds the GIL, so threads would not help).  By default one
        per CPU, at most 4, on Linux when the job is big enough to pay for
        the fork (sites x nodes >= 5 million); 1 searches in this process.
        The result is the same whatever the count.
    memory_budget_gb : float, optional
        Refuse a relation that would need more memory than this (GB),
        with the coarsening that would fit, before the searches have gone
        far: once the demand is snapped, the pairs are estimated from the
        searches of 32 sites spread over the list (exact with 32 sites or
        fewer) at 24 bytes a pair (the pairs as searched and the finished
        relation side by side).  None (default): no check.

    Returns
    -------
    Reach
        CSR demand x sites, values = seconds, rule
        ``ServiceRule(Metric.NETWORK, limit_s, "s")``.  ``reach.notes``
        holds ``unsnapped_demand`` / ``unsnapped_sites`` (indices),
        ``components`` (how many parts, demand weight and sites on each),
        ``network`` (the :class:`RoadNetwork`) and the snaps.
    """
    from .coverage import _check_limit, _check_pair, _same_crs

    _check_pair(demand, sites)
    limit = _check_limit(limit_s, "limit", "seconds")
    for name, value in (("offroad_speed_kmh", offroad_speed_kmh), ("max_snap_m", max_snap_m)):
        if isinstance(value, (bool, np.bool_)) or not (
            isinstance(value, (int, float, np.integer, np.floating)) and math.isfinite(value) and value > 0
        ):
            raise ParameterError(f"{name}: must be a positive number, got {value!r}", name)
    crs = demand.crs if demand.crs is not None else sites.crs
    if crs is None:
        raise CRSError("reach_network: the demand has no CRS, so the roads cannot be matched to it; give it the working CRS")
    require_projected(crs, "demand CRS")
    _same_crs(demand, sites)
    _check_penalty(turn_penalty_s)  # before the road layer is read
    if workers is not None and (isinstance(workers, (bool, np.bool_)) or not isinstance(workers, (int, np.integer)) or workers < 1):
        raise ParameterError(f"workers: must be a whole number of 1 or more (or None for automatic), got {workers!r}", "workers")
    if memory_budget_gb is not None and (
        isinstance(memory_budget_gb, (bool, np.bool_))
        or not isinstance(memory_budget_gb, (int, float, np.integer, np.floating))
        or not (math.isfinite(memory_budget_gb) and memory_budget_gb > 0)
    ):
        raise ParameterError(f"memory_budget_gb: must be a positive number of GB, got {memory_budget_gb!r}", "memory_budget_gb")
    frame = _resolve_roads(roads, crs)
    net = build_network(
        frame,
        speed_field=speed_field,
        class_field=class_field,
        speed_table=speed_table,
        oneway_field=oneway_field,
        turn_penalty_s=turn_penalty_s,
        split_crossings=split_crossings,
    )
    object.__setattr__(net, "crs", str(crs))
    n_workers = _search_workers(workers, len(sites), net.n_nodes)
    v_off = float(offroad_speed_kmh) / 3.6
    ssnap = net.snap(sites.xy, float(max_snap_m), workers=n_workers)
    s_off = ssnap.distance / v_off

    def snap_demand() -> tuple[Snap, np.ndarray]:  # while the sites' searches start (see _run_searches)
        dsnap = net.snap(demand.xy, float(max_snap_m), workers=n_workers)
        return dsnap, dsnap.distance / v_off

    net_pairs, direct, dsnap, d_off = _network_pairs(
        net, ssnap, s_off, limit, snap_demand, len(demand), workers, memory_budget_gb
    )
    mat = _combine(len(demand), len(sites), net_pairs, direct)
    unsnapped_d = np.flatnonzero(~dsnap.snapped)
    unsnapped_s = np.flatnonzero(~ssnap.snapped)
    if len(unsnapped_d):
        logger.warning(
            "network coverage: %d demand point(s) (%.6g people) lie more than %g m from every road and are not covered",
            len(unsnapped_d), float(demand.weight[unsnapped_d].sum()), max_snap_m,
        )
    if len(unsnapped_s):
        logger.warning("network coverage: %d site(s) lie more than %g m from every road and cover nothing", len(unsnapped_s), max_snap_m)
    comps = _components_report(net, dsnap, demand, ssnap)
    if comps["count"] > 1:
        logger.warning(
            "network coverage: the road network has %d disconnected parts; %.6g people sit on parts with no site",
            comps["count"], comps["weight_without_site"],
        )
    notes = {
        "unsnapped_demand": unsnapped_d,
        "unsnapped_sites": unsnapped_s,
        "unsnapped_demand_weight": float(demand.weight[unsnapped_d].sum()),
        "components": comps,
        "network": net,
        "demand_snap": dsnap,
        "site_snap": ssnap,
        "offroad_speed_kmh": float(offroad_speed_kmh),
        "max_snap_m": float(max_snap_m),
    }
    return Reach.from_matrix(mat, demand, sites, ServiceRule(Metric.NETWORK, limit, "s"), notes=notes)


# --------------------------------------------------------------------------- service areas


def network_service_areas(reach: Reach, chosen: Any = None, limit_s: float | None = None, clip: Any = None, steps: int = 4) -> np.ndarray:
    """The area each chosen site reaches within the limit, for display.

    Built from the reached road pieces (partial segments cut at the exact
    remaining time) buffered by the off-road distance that the remaining
    time still allows (capped at ``max_snap_m``); each piece is split into
    ``steps`` parts buffered by the allowance at their far end, so the
    polygon is a slight under-estimate.  It is an approximation for maps;
    coverage itself comes from the graph.
    """
    import shapely
    notes = getattr(reach, "notes", None) or {}
    net: RoadNetwork | None = notes.get("network")
    if net is None:
        raise InputError("network_service_areas: the Reach carries no road network (make it with reach_network)")
    from .areas import _as_clip, _chosen

    ssnap: Snap = notes["site_snap"]
    limit = float(reach.rule.limit if limit_s is None else limit_s)
    if not (math.isfinite(limit) and limit > 0):
        raise ParameterError(f"limit_s: the travel-time limit must be a positive number of seconds, got {limit_s!r}", "limit_s")
    if int(steps) < 1:
        raise ParameterError(f"steps: must be 1 or more parts per reached road piece, got {steps!r}", "steps")
    idx = _chosen(chosen, len(ssnap.segment))
    v_off = notes["offroad_speed_kmh"] / 3.6
    cap = notes["max_snap_m"]
    area = _as_clip(clip)
    out = []
    fr = np.linspace(0.0, 1.0, int(steps) + 1)
    drawn = idx[ssnap.snapped[idx] & (ssnap.distance[idx] / v_off <= limit)]
    # one graph with a virtual source per drawn site (building it per site re-sorted every edge each time)
    graph = _source_graph(net, ssnap, drawn) if len(drawn) else None
    source = dict(zip(drawn.tolist(), range(net.n_nodes, net.n_nodes + len(drawn))))
    for j in idx.tolist():
        if j not in source:
            out.append(shapely.Polygon())
            continue
        budget = limit - ssnap.distance[j] / v_off
        times = dijkstra(graph, directed=True, indices=source[j], limit=budget)[: net.n_nodes]
        # reach along each segment from u (fraction fu of it) and from v (fraction fv)
        start = _at_node(net, ssnap, np.array([j]))[0]  # no penalty for leaving the node the site stands on
        pu = times[net.seg_u] + np.where(net.seg_u == start, 0.0, net.penalty(net.seg_u))
        pv = times[net.seg_v] + np.where(net.seg_v == start, 0.0, net.penalty(net.seg_v))
        fu = np.where(net.forward, np.clip((budget - pu) / net.seg_time, 0.0, 1.0), 0.0)
        fv = np.where(net.backward, np.clip((budget - pv) / net.seg_time, 0.0, 1.0), 0.0)
        fu[~np.isfinite(fu)] = 0.0
        fv[~np.isfinite(fv)] = 0.0
        seg_j, ts = int(ssnap.segment[j]), float(ssnap.t[j])
        pieces: list[tuple[int, float, float]] = []  # segment, from fraction, to fraction
        for seg in np.flatnonzero((fu > 0) | (fv > 0)):
            if fu[seg] + fv[seg] >= 1.0:
                pieces.append((int(seg), 0.0, 1.0))
            else:
                if fu[seg] > 0:
                    pieces.append((int(seg), 0.0, float(fu[seg])))
                if fv[seg] > 0:
                    pieces.append((int(seg), 1.0 - float(fv[seg]), 1.0))
        full_j = float(net.seg_time[seg_j])
        if net.forward[seg_j]:
            pieces.append((seg_j, ts, min(1.0, ts + budget / full_j)))
        if net.backward[seg_j]:
            pieces.append((seg_j, max(0.0, ts - budget / full_j), ts))
        p = np.array(pieces, dtype=np.float64)
        segs = p[:, 0].astype(np.int64)
        f = p[:, 1:2] + (p[:, 2:3] - p[:, 1:2]) * fr[None, :]  # (pieces, steps + 1) fractions
        full = net.seg_time[segs][:, None]
        with np.errstate(invalid="ignore"):
            rem = np.maximum(
                np.where(net.forward[segs][:, None], budget - pu[segs][:, None] - f * full, -np.inf),
                np.where(net.backward[segs][:, None], budget - pv[segs][:, None] - (1.0 - f) * full, -np.inf),
            )
            own = segs == seg_j
            direct = np.where(
                (f >= ts) & net.forward[seg_j], budget - (f - ts) * full_j,
                np.where((f <= ts) & net.backward[seg_j], budget - (ts - f) * full_j, -np.inf),
            )
        rem = np.where(own[:, None], np.maximum(rem, direct), rem)
        rem = np.nan_to_num(rem, nan=0.0, neginf=0.0)
        radius = np.clip(np.minimum(rem[:, :-1], rem[:, 1:]) * v_off, 0.0, cap).ravel()
        a, b = net.node_xy[net.seg_u[segs]], net.node_xy[net.seg_v[segs]]
        start = (a[:, None, :] + f[:, :-1, None] * (b - a)[:, None, :]).reshape(-1, 2)
        end = (a[:, None, :] + f[:, 1:, None] * (b - a)[:, None, :]).reshape(-1, 2)
        lines = shapely.linestrings(np.stack([start, end], axis=1))
        polys = shapely.buffer(lines, np.maximum(radius, 0.5), quad_segs=4)
        geom = shapely.union_all(polys)
        if area is not None:
            geom = shapely.intersection(geom, area)
        out.append(geom)
    return np.asarray(out, dtype=object)
