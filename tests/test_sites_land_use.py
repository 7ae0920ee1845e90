"""Land-use screening: point sites by their cell, parcels by the share of their area on allowed classes.

Independent checks: parcel shares against exactextract's coverage fractions
(``frac`` per ``unique`` class value, exactextract from PyPI), point classes
against rasterio's ``DatasetReader.sample``.
"""

from __future__ import annotations

import logging
import re

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
from rasterio.transform import from_origin
from shapely import affinity
from shapely.geometry import Point, box

from geocover.errors import ParameterError
from geocover.sites import LandUseMask, screen_sites
from geocover.values import Verdict

CRS = "EPSG:32626"
X0, Y0 = 500_000.0, 4_000_000.0
CELL = 10.0
SIZE = 40


@pytest.fixture()
def land_use(tmp_path):
    rng = np.random.default_rng(3)
    classes = rng.integers(1, 8, size=(SIZE, SIZE)).astype(np.uint8)
    classes[:5, :5] = 0  # a nodata corner
    path = tmp_path / "land_use.tif"
    with rasterio.open(
        path, "w", driver="GTiff", width=SIZE, height=SIZE, count=1, dtype="uint8", crs=CRS,
        transform=from_origin(X0, Y0 + SIZE * CELL, CELL, CELL), nodata=0,
    ) as dst:
        dst.write(classes, 1)
    return path, classes


def _parcels(n=40, seed=11):
    rng = np.random.default_rng(seed)
    shapes = []
    for _ in range(n):
        cx, cy = rng.uniform(80, SIZE * CELL - 80, size=2)
        w, h = rng.uniform(8, 60, size=2)
        shape = affinity.rotate(box(cx - w / 2, cy - h / 2, cx + w / 2, cy + h / 2), rng.uniform(0, 90))
        if rng.random() < 0.3:
            shape = shape.difference(Point(cx, cy).buffer(min(w, h) / 4))  # a parcel with a hole
        shapes.append(affinity.translate(shape, X0, Y0))
    return gpd.GeoDataFrame({"pid": np.arange(n)}, geometry=shapes, crs=CRS)


def test_parcel_shares_agree_with_exactextract(land_use):
    from exactextract import exact_extract

    path, _ = land_use
    parcels = _parcels()
    allowed = (1, 2, 3)
    _, record = screen_sites(parcels, land_use=LandUseMask(path, allowed=allowed, min_share=0.5))
    # oracle: exactextract, fraction of each parcel's covered area per class value
    # (parcels lie away from the nodata corner, so its denominator is the full area)
    table = exact_extract(str(path), parcels, ["unique", "frac"], output="pandas")
    oracle = np.array([
        float(np.sum(np.asarray(f)[np.isin(np.asarray(u), allowed)])) for u, f in zip(table["unique"], table["frac"])
    ])
    # both are exact cell-coverage areas (they agree to ~1e-8): a 1 % tolerance would hide a lost hole or sliver
    np.testing.assert_allclose(record.land_use_share, oracle, atol=1e-6)
    # the verdicts follow the share and the threshold
    expect = np.where(oracle >= 0.5, Verdict.KEPT.value, Verdict.LAND_USE.value)
    clear = np.abs(oracle - 0.5) > 1e-6
    assert (record.verdict[clear] == expect[clear]).all()
    assert (record.verdict == Verdict.LAND_USE.value).any() and (record.verdict == Verdict.KEPT.value).any()
    assert record.rule[record.verdict == "land_use"][0] == "less than 50% of the parcel on land use in classes (1, 2, 3)"


def test_tiled_reads_give_the_same_answer(land_use, monkeypatch, caplog):
    import geocover.landuse as landuse_module

    path, _ = land_use
    parcels = _parcels(seed=8)
    rng = np.random.default_rng(2)
    xy = rng.uniform(-20, SIZE * CELL + 20, size=(100, 2)) + [X0, Y0]
    both = gpd.GeoDataFrame(
        geometry=list(parcels.geometry) + list(gpd.points_from_xy(xy[:, 0], xy[:, 1])), crs=CRS
    )
    mask = LandUseMask(path, allowed=(2, 4, 6), min_share=0.3)
    _, whole = screen_sites(both, land_use=mask)
    monkeypatch.setattr(landuse_module, "_MAX_WINDOW_CELLS", 10)
    monkeypatch.setattr(landuse_module, "_TILE_CELLS", 7)
    with caplog.at_level(logging.DEBUG, logger="geocover.landuse"):
        _, tiled = screen_sites(both, land_use=mask)
    # the tiled path really ran (a patch of the wrong module would compare the whole read with itself)
    windows = [int(m) for r in caplog.records for m in re.findall(r"read in (\d+) window", r.getMessage())]
    assert windows and windows[0] > 1
    np.testing.assert_allclose(tiled.land_use_share, whole.land_use_share, atol=1e-12)
    assert tiled.verdict.tolist() == whole.verdict.tolist()
    assert tiled.feature.tolist() == whole.feature.tolist()


def test_forbidden_is_the_complement_of_allowed(land_use):
    path, _ = land_use
    parcels = _parcels(seed=5)
    _, allow = screen_sites(parcels, land_use=LandUseMask(path, allowed=(1, 2, 3, 4, 5)))
    _, forbid = screen_sites(parcels, land_use=LandUseMask(path, forbidden=(6, 7)))
    np.testing.assert_allclose(allow.land_use_share, forbid.land_use_share, atol=1e-12)


def test_points_are_judged_by_their_cell(land_use):
    path, classes = land_use
    rng = np.random.default_rng(1)
    xy = rng.uniform(0, SIZE * CELL, size=(200, 2)) + [X0, Y0]
    cands = gpd.GeoDataFrame(geometry=gpd.points_from_xy(xy[:, 0], xy[:, 1]), crs=CRS)
    _, record = screen_sites(cands, land_use=LandUseMask(path, forbidden=(6, 7)))
    with rasterio.open(path) as src:  # oracle: rasterio's own sampling
        sampled = np.array([v[0] for v in src.sample(xy)])
    ok = (sampled != 0) & ~np.isin(sampled, [6, 7])
    assert record.verdict.tolist() == np.where(ok, "kept", "land_use").tolist()
    np.testing.assert_array_equal(record.land_use_share, ok.astype(float))
    # the record names the class a rejected point stands on (-1 for nodata)
    rejected = ~ok
    assert record.feature[rejected].tolist() == np.where(sampled[rejected] == 0, -1, sampled[rejected]).tolist()
    assert (record.layer[rejected] == "land_use").all()


def test_area_off_the_raster_and_on_nodata_is_not_allowed(land_use):
    path, classes = land_use
    # a parcel half off the west edge of the raster, over cells that are all allowed
    classes_allowed = tuple(range(1, 8))
    half_off = box(X0 - 50, Y0 + 200, X0 + 50, Y0 + 210)
    nodata_corner = box(X0 + 1, Y0 + SIZE * CELL - 49, X0 + 49, Y0 + SIZE * CELL - 1)
    cands = gpd.GeoDataFrame(geometry=[half_off, nodata_corner], crs=CRS)
    _, record = screen_sites(cands, land_use=LandUseMask(path, allowed=classes_allowed, min_share=0.4))
    np.testing.assert_allclose(record.land_use_share, [0.5, 0.0], atol=1e-9)
    assert record.verdict.tolist() == ["kept", "land_use"]


def test_raster_in_another_crs(tmp_path):
    # a raster in geographic degrees around the same place; candidate points in UTM
    path = tmp_path / "lu_ll.tif"
    lon0, lat0 = -27.0, 36.14
    with rasterio.open(
        path, "w", driver="GTiff", width=2, height=1, count=1, dtype="uint8", crs="EPSG:4326",
        transform=from_origin(lon0, lat0, 0.01, 0.01), nodata=0,
    ) as dst:
        dst.write(np.array([[1, 6]], dtype=np.uint8), 1)
    pts_ll = gpd.GeoDataFrame(geometry=[Point(lon0 + 0.005, lat0 - 0.005), Point(lon0 + 0.015, lat0 - 0.005)], crs="EPSG:4326")
    cands = pts_ll.to_crs(CRS)
    _, record = screen_sites(cands, land_use=LandUseMask(path, allowed=(1,)))
    assert record.verdict.tolist() == ["kept", "land_use"]
    assert any("land-use raster" in n for n in record.notes)


def test_land_use_mask_parameters():
    with pytest.raises(ParameterError, match="exactly one"):
        LandUseMask("x.tif")
    with pytest.raises(ParameterError, match="exactly one"):
        LandUseMask("x.tif", allowed=(1,), forbidden=(2,))
    with pytest.raises(ParameterError, match="whole class codes"):
        LandUseMask("x.tif", allowed=(1.5,))
    assert LandUseMask("x.tif", allowed=3, min_share="75 %").min_share == 0.75
    with pytest.raises(ParameterError, match="min_share"):
        LandUseMask("x.tif", allowed=(1,), min_share=0)


def test_parcels_over_the_edge_count_the_area_off_the_raster_as_class_minus_one(tmp_path):
    # 10 x 10 cells of 10 m: class 1 everywhere but column 9 (class 6); closed-form areas of boxes
    path = tmp_path / "edge.tif"
    classes = np.ones((10, 10), dtype=np.uint8)
    classes[:, 9] = 6
    with rasterio.open(path, "w", driver="GTiff", width=10, height=10, count=1, dtype="uint8", crs=CRS,
                       transform=from_origin(X0, Y0 + 100, 10, 10), nodata=0) as dst:
        dst.write(classes, 1)
    cands = gpd.GeoDataFrame(geometry=[
        box(X0 + 85, Y0 + 50, X0 + 115, Y0 + 60),        # 5 m on class 1, 10 m on class 6, 15 m off: off wins
        box(X0 + 70, Y0 + 50, X0 + 102, Y0 + 60),        # 20 m on 1, 10 m on 6, 2 m off: class 6 wins
        box(X0 + 95, Y0 + 50, X0 + 50_095, Y0 + 60),     # 5 m on the raster, 50 km off it
        box(X0 - 5_000, Y0 - 5_000, X0 - 4_000, Y0 - 4_000),  # wholly off
    ], crs=CRS)
    _, record = screen_sites(cands, land_use=LandUseMask(path, allowed=(1,), min_share=0.1))
    np.testing.assert_allclose(record.land_use_share, [5 / 30, 20 / 32, 0.0, 0.0], rtol=0, atol=1e-12)
    assert record.verdict.tolist() == ["kept", "kept", "land_use", "land_use"]
    assert record.feature.tolist() == [-1, -1, -1, -1]  # kept sites carry no class
    inside = gpd.GeoDataFrame(geometry=[box(X0 + 10, Y0 + 10, X0 + 30, Y0 + 30)], crs=CRS)  # all class 1
    _, strict = screen_sites(pd.concat([cands, inside]), land_use=LandUseMask(path, allowed=(1,), min_share=0.9))
    assert strict.feature.tolist() == [-1, 6, -1, -1, -1]
    assert strict.verdict.tolist()[-1] == "kept"


def test_land_use_classes_given_as_text_are_read_as_codes():
    assert LandUseMask("x.tif", allowed="12, 3").allowed == (12, 3)
    assert LandUseMask("x.tif", forbidden="6 7").forbidden == (6, 7)
    with pytest.raises(ParameterError, match="whole class codes"):
        LandUseMask("x.tif", allowed="urban")
