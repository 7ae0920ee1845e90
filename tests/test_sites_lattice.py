"""Lattice candidates: closed-form counts for rectangles, nothing outside the area; and a screening property.

The counts are closed-form (see ``lattice_candidates``): a square lattice
starting half a spacing in from the corner has ``floor(W/s + 1/2)`` columns;
a hexagonal one has rows ``h = s * sqrt(3) / 2`` apart, ``floor(H/h + 1/2)``
of them, even rows with ``floor(W/s + 1/2)`` points and shifted odd rows with
``floor(W/s)``.
"""

from __future__ import annotations

import math

import geopandas as gpd
import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy.spatial import cKDTree
from shapely.geometry import Point, box

from geocover.errors import InputError, ParameterError
from geocover.sites import Exclusion, lattice_candidates, screen_sites

CRS = "EPSG:32626"
X0, Y0 = 400_000.0, 4_100_000.0


def _square_count(w: float, h: float, s: float) -> int:
    return math.floor(w / s + 0.5) * math.floor(h / s + 0.5)


def _hex_count(w: float, h: float, s: float) -> int:
    rows = math.floor(h / (s * math.sqrt(3) / 2) + 0.5)
    return math.ceil(rows / 2) * math.floor(w / s + 0.5) + (rows // 2) * math.floor(w / s)


def _off_edge(v: float) -> bool:
    return abs(v - round(v)) > 1e-6


@settings(max_examples=40, deadline=None)
@given(
    w=st.floats(150, 3000), h=st.floats(150, 3000), s=st.floats(50, 400), hexagonal=st.booleans()
)
def test_rectangle_counts_are_closed_form(w, h, s, hexagonal):
    dy = s * math.sqrt(3) / 2 if hexagonal else s
    # keep clear of the measure-zero cases where a point sits on the edge within rounding
    assume(_off_edge(w / s + 0.5) and _off_edge(h / dy + 0.5) and _off_edge(w / s))
    area = box(X0, Y0, X0 + w, Y0 + h)
    pts = lattice_candidates(area, s, shape="hex" if hexagonal else "square", crs=CRS)
    expected = _hex_count(w, h, s) if hexagonal else _square_count(w, h, s)
    assert len(pts) == expected


def test_exact_fit_and_hex_neighbours():
    area = gpd.GeoDataFrame(geometry=[box(X0, Y0, X0 + 1000, Y0 + 600)], crs=CRS)
    square = lattice_candidates(area, "100 m")
    assert len(square) == 60
    xy = np.column_stack([square.geometry.x, square.geometry.y])
    assert xy[:, 0].min() == X0 + 50 and xy[:, 1].min() == Y0 + 50
    hexa = lattice_candidates(area, 100, shape="hex")
    hxy = np.column_stack([hexa.geometry.x, hexa.geometry.y])
    d, _ = cKDTree(hxy).query(hxy, k=2)
    np.testing.assert_allclose(d[:, 1], 100.0, rtol=1e-12)
    assert len(hexa) == _hex_count(1000, 600, 100)
    assert hexa.crs.to_epsg() == 32626
    assert set(hexa.columns) >= {"label", "lattice_row", "lattice_col", "geometry"}


def test_no_point_outside_an_area_with_a_hole_and_none_missing():
    s = 40.0
    outer = box(X0, Y0, X0 + 1000, Y0 + 800).difference(box(X0 + 600, Y0 + 400, X0 + 1000, Y0 + 800))  # an L
    area = outer.difference(Point(X0 + 300, Y0 + 300).buffer(150))
    pts = lattice_candidates(area, s, crs=CRS)
    x, y = pts.geometry.x.to_numpy() - X0, pts.geometry.y.to_numpy() - Y0
    # independent of GEOS: the L and the hole by plain inequalities
    in_l = (x >= 0) & (x <= 1000) & (y >= 0) & (y <= 800) & ~((x > 600) & (y > 400))
    in_hole = np.hypot(x - 300, y - 300) < 150 - 1.0  # the buffer is a polygon; keep 1 m clear of its chords
    assert in_l.all() and not in_hole.any()
    gx, gy = np.meshgrid(np.arange(s / 2, 1000, s), np.arange(s / 2, 800, s))
    gx, gy = gx.ravel(), gy.ravel()
    should = ~((gx > 600) & (gy > 400)) & (np.hypot(gx - 300, gy - 300) > 150 + 1.0)
    have = set(zip(np.round(x, 6), np.round(y, 6)))
    assert all((round(a, 6), round(b, 6)) in have for a, b in zip(gx[should], gy[should]))


def test_lattice_parameters():
    with pytest.raises(ParameterError, match="square, hex"):
        lattice_candidates(box(0, 0, 10, 10), 1, shape="triangle", crs=CRS)
    with pytest.raises(ParameterError, match="spacing_m"):
        lattice_candidates(box(0, 0, 10, 10), 0, crs=CRS)
    with pytest.raises(ParameterError, match="larger spacing"):
        lattice_candidates(box(0, 0, 1e6, 1e6), 0.1, crs=CRS)


zone_st = st.tuples(st.floats(0, 900), st.floats(0, 900), st.floats(5, 300), st.floats(5, 300), st.floats(0, 60))


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 10_000),
    parcels=st.booleans(),
    zones=st.lists(zone_st, min_size=1, max_size=4),
    extra=zone_st,
)
def test_adding_an_exclusion_zone_never_adds_a_kept_site(seed, parcels, zones, extra):
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 1000, size=(60, 2)) + [X0, Y0]
    geoms = gpd.points_from_xy(xy[:, 0], xy[:, 1])
    if parcels:
        geoms = [box(x - 10, y - 5, x + 10, y + 5) for x, y in xy]
    cands = gpd.GeoDataFrame(geometry=geoms, crs=CRS)

    def layer(z):
        x, y, w, h, setback = z
        frame = gpd.GeoDataFrame(geometry=[box(X0 + x, Y0 + y, X0 + x + w, Y0 + y + h)], crs=CRS)
        return Exclusion(frame, setback_m=setback, name="z")

    def kept(rules):
        try:
            _, record = screen_sites(cands, exclude=rules)
        except InputError:  # everything screened out
            return set()
        return set(np.flatnonzero(record.site_index >= 0))

    before = kept([layer(z) for z in zones])
    after = kept([layer(z) for z in zones] + [layer(extra)])
    assert after <= before


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10_000), parcels=st.booleans(), zones=st.lists(zone_st, min_size=1, max_size=4))
def test_kept_footprints_clear_every_zone_by_its_setback(seed, parcels, zones):
    """Independent re-check with shapely's distance on the raw geometries, for random zones and setbacks."""

    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 1000, size=(60, 2)) + [X0, Y0]
    geoms = [box(x - 10, y - 5, x + 10, y + 5) for x, y in xy] if parcels else list(gpd.points_from_xy(xy[:, 0], xy[:, 1]))
    cands = gpd.GeoDataFrame(geometry=geoms, crs=CRS)
    rules, raw = [], []
    for i, (x, y, w, h, setback) in enumerate(zones):
        zone = box(X0 + x, Y0 + y, X0 + x + w, Y0 + y + h)
        raw.append((zone, setback))
        rules.append(Exclusion(gpd.GeoDataFrame(geometry=[zone], crs=CRS), setback_m=setback, name=f"z{i}"))
    try:
        _, record = screen_sites(cands, exclude=rules)
    except InputError:
        kept = np.zeros(len(geoms), dtype=bool)
    else:
        kept = record.site_index >= 0
    for i, footprint in enumerate(geoms):
        clear = all(
            (footprint.distance(zone) >= setback) if setback > 0 else not footprint.intersects(zone)
            for zone, setback in raw
        )
        assert kept[i] == clear


def test_a_lattice_too_coarse_for_the_area_says_to_use_a_smaller_spacing():
    from geocover.errors import LayerError

    empty = lattice_candidates(box(X0, Y0, X0 + 40, Y0 + 40), 100, crs=CRS)  # floor(0.4 + 0.5) = 0 columns
    assert len(empty) == 0
    with pytest.raises(LayerError, match="the lattice has no point inside the study area; use a smaller lattice spacing"):
        screen_sites(empty)
