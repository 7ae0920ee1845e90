"""Property tests (hypothesis): population is conserved whatever the grid, nodata, factor and window."""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pytest
from affine import Affine
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from geocover.demand import demand_from_grid
from geocover.grid import block_points

from test_demand_fixtures import write_raster

counts = arrays(
    np.float64,
    st.tuples(st.integers(1, 12), st.integers(1, 12)),
    elements=st.one_of(st.just(0.0), st.floats(0.0, 1e6, allow_nan=False, allow_infinity=False)),
)


@settings(max_examples=60, deadline=None)
@given(counts, st.integers(1, 6), st.integers(0, 5), st.integers(0, 5))
def test_core_blocks_conserve_and_stay_in_their_block(data, k, row_off_blocks, col_off_blocks):
    transform = Affine(30.0, 0.0, 1000.0, 0.0, -30.0, 9000.0)
    pts = block_points(
        data, transform, grid_width=data.shape[1] + col_off_blocks * k,
        row_off=row_off_blocks * k, col_off=col_off_blocks * k, factor=k,
    )
    assert pts.weight.sum() == pytest.approx(data.sum(), rel=1e-12, abs=1e-9)
    assert (pts.weight > 0).all()
    # each weighted centroid lies inside its block
    x0 = 1000.0 + 30.0 * pts.col0
    y0 = 9000.0 - 30.0 * pts.row0
    assert ((pts.x >= x0 - 1e-6) & (pts.x <= x0 + 30.0 * k + 1e-6)).all()
    assert ((pts.y <= y0 + 1e-6) & (pts.y >= y0 - 30.0 * k - 1e-6)).all()
    assert len(np.unique(pts.unit)) == len(pts)


grids = arrays(
    np.float32,
    st.tuples(st.integers(1, 15), st.integers(1, 15)),
    elements=st.one_of(st.just(-9.0), st.just(0.0), st.floats(0.0, 5000.0, width=32)),
)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(grids, st.integers(1, 5), st.one_of(st.none(), st.integers(1, 7)))
def test_grid_reader_conserves_total_with_nodata(data, k, rows):
    with tempfile.TemporaryDirectory() as tmp:
        path = write_raster(Path(tmp) / "pop.tif", data, nodata=-9.0)
        d = demand_from_grid(path, coarsen=k, window_rows=rows)
    expected = float(np.where(data == -9.0, 0.0, data).astype(np.float64).sum())
    assert d.total == pytest.approx(expected, rel=1e-9, abs=1e-6)
    s = d.summary
    assert s["people_in"] == pytest.approx(expected, rel=1e-9, abs=1e-6)
    assert s["people_out"] + sum(v["people"] for v in s["dropped"].values()) == pytest.approx(s["people_in"], rel=1e-12, abs=1e-9)
    assert s.get("dropped", {}).get("nodata", {"cells": 0})["cells"] == int((data == -9.0).sum())


@settings(max_examples=30, deadline=None)
@given(st.lists(st.integers(0, 300), min_size=1, max_size=12), st.integers(0, 50))
def test_point_buffer_grows_without_losing_points(batches, start):
    from geocover.grid import PointBuffer

    buf = PointBuffer(start)
    expected = []
    base = 0
    for k in batches:
        if k % 2:
            flat = np.arange(k, dtype=np.int64)
            buf.add_cells(flat, base, np.full(k, 2.0, dtype=np.float32), Affine(10, 0, 0, 0, -10, 0), 1000, 7.0)
        else:
            buf.add_points(np.arange(k) * 1.0, -np.arange(k) * 1.0, np.ones(k), base + np.arange(k), np.full(k, 3.0))
        expected.extend((base + i, k % 2) for i in range(k))
        base += 10_000
    xy, w, u, fp = buf.finish()
    assert len(u) == sum(batches)
    assert u.tolist() == [e[0] for e in expected]
    assert w.tolist() == [2.0 if e[1] else 1.0 for e in expected]
    assert fp.tolist() == [7.0 if e[1] else 3.0 for e in expected]
    cells = np.array([e[1] == 1 for e in expected], dtype=bool)
    # cells: centre of (row, col) = (u // 1000, u % 1000) under the 10 m grid
    np.testing.assert_allclose(xy[cells, 0], (u[cells] % 1000 + 0.5) * 10)
    np.testing.assert_allclose(xy[cells, 1], -(u[cells] // 1000 + 0.5) * 10)


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.lists(st.tuples(st.floats(500000, 501200), st.floats(3999000, 4000000)), min_size=3, max_size=7),
    st.floats(5.0, 300.0),
    st.integers(0, 10_000),
)
def test_clip_fraction_agrees_with_exactextract_on_random_polygons(points, radius, seed):
    import geopandas as gpd
    import shapely
    from exactextract import exact_extract  # independent zonal statistics (exactextract, PyPI)

    poly = shapely.convex_hull(shapely.MultiPoint(points)).buffer(radius, quad_segs=4)
    rng = np.random.default_rng(seed)
    data = rng.gamma(1.0, 10.0, size=(12, 14)).astype(np.float32)
    data[rng.random(data.shape) < 0.3] = -1
    frame = gpd.GeoDataFrame(geometry=[poly], crs="EPSG:32626")
    with tempfile.TemporaryDirectory() as tmp:
        path = write_raster(Path(tmp) / "pop.tif", data, nodata=-1)
        ref = float(exact_extract(str(path), frame, "sum", output="pandas")["sum"].iloc[0])
        d = demand_from_grid(path, clip=frame, clip_mode="fraction", window_rows=5)
    assert d.total == pytest.approx(ref, rel=1e-6, abs=1e-6)
    s = d.summary
    assert s["people_out"] + s["dropped"]["outside_clip"]["people"] == pytest.approx(s["people_in"], rel=1e-12)


@settings(max_examples=30, deadline=None)
@given(
    st.integers(1, 9), st.integers(1, 13), st.integers(0, 40), st.sampled_from([1, 5, 16, 1 << 17]),
    st.booleans(), st.integers(0, 2**32 - 1),
)
def test_staged_rows_are_the_masked_cells(h, w, row_off, chunk, rotated, seed):
    # stage_rows works in row chunks; whatever the chunk, it must give the masked cells in row-major order,
    # centres equal to the bit to cell_centres, and nothing added until commit (a dropped strip leaves no trace)
    import geocover.grid as grid
    from geocover.grid import PointBuffer, cell_centres

    rng = np.random.default_rng(seed)
    mask = rng.random((h, w)) < 0.4
    values = rng.random((h, w)).astype(np.float32)
    t = Affine(30, 4, 1000, 3, -30, 9000) if rotated else Affine(30, 0, 1000, 0, -30, 9000)
    width = w
    old = grid.STAGE_CELLS
    grid.STAGE_CELLS = chunk
    try:
        buf = PointBuffer(0)
        staged = np.empty(h * w, dtype=np.float32)
        assert buf.stage_rows(~mask, values, row_off, t, staged) == int((~mask).sum())  # dropped: not committed
        k = buf.stage_rows(mask, values, row_off, t, staged)
        buf.commit(k, staged, 7.0)
    finally:
        grid.STAGE_CELLS = old
    xy, wt, u, _ = buf.finish()
    expected_units = np.flatnonzero(mask) + row_off * width
    assert k == len(expected_units) and u.tolist() == expected_units.tolist()
    assert wt.tolist() == values[mask].astype(np.float64).tolist()
    assert np.array_equal(xy, cell_centres(expected_units, t, width))


@pytest.mark.parametrize("state", [True, False])
def test_small_page_arrays_leave_numpys_hugepage_switch_as_it_was(state):
    import geocover.grid as grid

    if grid._SET_HUGEPAGE is None:
        pytest.skip("this numpy has no hugepage switch")
    before = grid._SET_HUGEPAGE(state)
    try:
        arr = grid.empty_small_pages((1 << 20, 2), np.float64)  # 16 MB: numpy would advise huge pages
        assert arr.shape == (1 << 20, 2) and arr.dtype == np.float64 and arr.flags.writeable
        assert grid._SET_HUGEPAGE(state) is state  # what empty_small_pages left behind
    finally:
        grid._SET_HUGEPAGE(before)
