"""Array core for area demand: representative points, footprints, and splitting a polygon over cells.

Everything here takes shapely geometries and numpy arrays already in the
working CRS and returns arrays; nothing opens a file.

A polygon's people are *spread* over a set of cells (lattice squares, or a
weight raster's cells carried into the working CRS as quadrilaterals): each
cell receives people in proportion to ``density * area(cell & polygon)``, so
the shares sum to the polygon's total and every piece of the polygon is
accounted for.  A cell wholly inside keeps its centre as the point; an edge
cell's point is shapely's ``point_on_surface`` of its piece, so no point
falls outside the polygon.

>>> import shapely
>>> square = shapely.box(0, 0, 20, 10)
>>> cells, centres = lattice_cells(square.bounds, 10.0)
>>> part = split_polygon(square, cells, centres, np.ones(len(cells)))
>>> part.share.tolist(), part.xy.tolist()
([0.5, 0.5], [[5.0, 5.0], [15.0, 5.0]])
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = ["Split", "farthest_vertex", "polygonal", "lattice_cells", "split_polygon", "MAX_CELLS_PER_POLYGON"]

#: more lattice cells than this for one polygon is an error asking for a larger spacing
MAX_CELLS_PER_POLYGON = 2_000_000


def farthest_vertex(geoms: Any, xy: np.ndarray) -> np.ndarray:
    """Distance from each point to the farthest vertex of its geometry.

    For a polygon this is the largest distance from the point to any place in
    the polygon (the farthest place of a polygon from a point is one of its
    vertices), so it bounds how far anyone the point stands for lives from it.

    >>> import shapely
    >>> farthest_vertex(np.array([shapely.box(0, 0, 4, 3)]), np.array([[0.0, 0.0]])).tolist()
    [5.0]
    """
    import shapely

    geoms = np.asarray(geoms, dtype=object)
    out = np.zeros(len(geoms), dtype=np.float64)
    if len(geoms) == 0:
        return out
    coords, index = shapely.get_coordinates(geoms, return_index=True)
    if len(coords):
        dist = np.hypot(coords[:, 0] - xy[index, 0], coords[:, 1] - xy[index, 1])
        np.maximum.at(out, index, dist)
    return out


def polygonal(geoms: Any) -> np.ndarray:
    """Only the polygon parts of each geometry (make_valid and intersections may add lines or points)."""
    import shapely

    geoms = np.asarray(geoms, dtype=object).copy()
    mixed = np.flatnonzero(shapely.get_type_id(geoms) == 7)  # GeometryCollection
    for i in mixed:
        parts = shapely.get_parts(geoms[i])
        parts = parts[np.isin(shapely.get_type_id(parts), [3, 6])]
        geoms[i] = shapely.union_all(parts) if len(parts) else shapely.Polygon()
    return geoms


def lattice_cells(bounds: tuple[float, float, float, float], spacing: float) -> tuple[np.ndarray, np.ndarray]:
    """Square cells of a lattice aligned to multiples of ``spacing`` that cover ``bounds``.

    Returns the cells as shapely polygons and their centres, shape (m, 2).
    """
    import shapely

    xmin, ymin, xmax, ymax = bounds
    i0, i1 = math.floor(xmin / spacing), max(math.ceil(xmax / spacing), math.floor(xmin / spacing) + 1)
    j0, j1 = math.floor(ymin / spacing), max(math.ceil(ymax / spacing), math.floor(ymin / spacing) + 1)
    count = (i1 - i0) * (j1 - j0)
    if count > MAX_CELLS_PER_POLYGON:
        raise ValueError(count)
    ii, jj = np.meshgrid(np.arange(i0, i1, dtype=np.float64), np.arange(j0, j1, dtype=np.float64))
    x0 = ii.ravel() * spacing
    y0 = jj.ravel() * spacing
    cells = shapely.box(x0, y0, x0 + spacing, y0 + spacing)
    centres = np.column_stack([x0 + spacing / 2.0, y0 + spacing / 2.0])
    return cells, centres


@dataclass(frozen=True, eq=False)
class Split:
    """How one polygon's people divide over cells.

    ``index`` are the cells that receive people, ``share`` their shares
    (summing to 1), ``xy`` their points (inside the polygon) and
    ``footprint`` the distance from each point to the farthest vertex of its
    piece of the polygon.
    """

    index: np.ndarray
    share: np.ndarray
    xy: np.ndarray
    footprint: np.ndarray


def split_polygon(polygon: Any, cells: np.ndarray, centres: np.ndarray, density: np.ndarray) -> Split | None:
    """Split ``polygon`` over ``cells`` in proportion to ``density * area(cell & polygon)``.

    Parameters
    ----------
    polygon : shapely Polygon or MultiPolygon
    cells : (m,) array of shapely polygons
        Cells tiling the plane around the polygon (lattice squares or
        raster cells in the working CRS).
    centres : (m, 2) array
        The point used for a cell lying wholly inside the polygon.
    density : (m,) array
        Non-negative weight per unit area of each cell (1 for a uniform
        spread; a raster value divided by the cell's area for a weight
        raster).

    Returns
    -------
    Split or None
        None when no cell of positive density meets the polygon, so that the
        caller can fall back to another placement.
    """
    import shapely

    cells = np.asarray(cells, dtype=object)
    density = np.asarray(density, dtype=np.float64)
    keep = density > 0
    cells, centres, density, index = cells[keep], np.asarray(centres)[keep], density[keep], np.flatnonzero(keep)
    if len(cells) == 0:
        return None
    shapely.prepare(polygon)
    touching = shapely.intersects(polygon, cells)
    cells, centres, density, index = cells[touching], centres[touching], density[touching], index[touching]
    if len(cells) == 0:
        return None
    whole = shapely.contains(polygon, cells)
    pieces = cells.copy()
    xy = np.array(centres, dtype=np.float64, copy=True).reshape(-1, 2)
    edge = np.flatnonzero(~whole)
    if len(edge):
        cut = polygonal(shapely.intersection(cells[edge], polygon))
        pieces[edge] = cut
        inner = shapely.point_on_surface(cut)
        ok = ~shapely.is_empty(inner)
        xy[edge[ok]] = shapely.get_coordinates(inner[ok])
    area = shapely.area(pieces)
    weight = density * area
    positive = weight > 0
    if not positive.any():
        return None
    pieces, xy, weight, index = pieces[positive], xy[positive], weight[positive], index[positive]
    share = weight / weight.sum()
    return Split(index, share, xy, farthest_vertex(pieces, xy))
