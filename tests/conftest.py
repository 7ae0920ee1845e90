"""Shared fixtures: tiny rasters and GeoPackages built in a temp folder (no checked-in blobs)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

REPO = Path(__file__).resolve().parents[1]
SAMPLE = REPO / "sample_layers"
CRS = "EPSG:32626"


def write_grid(path: Path, data: np.ndarray, x0: float, y0: float, cell: float, crs: str = CRS, nodata: float | None = -1.0) -> Path:
    """A single-band GeoTIFF with its top-left corner at (x0, y0 + rows * cell)."""
    import rasterio
    from affine import Affine

    rows = data.shape[0]
    transform = Affine(cell, 0.0, x0, 0.0, -cell, y0 + rows * cell)
    with rasterio.open(
        path, "w", driver="GTiff", height=data.shape[0], width=data.shape[1], count=1,
        dtype=data.dtype, crs=crs, transform=transform, nodata=nodata,
    ) as dst:
        dst.write(data, 1)
    return path


def make_tiny(folder: Path) -> dict[str, Path]:
    """A 2 x 2 km district: a 20 x 20 grid of 100 m cells, four candidates, one station, two flood zones."""
    import geopandas as gpd
    from shapely.geometry import Point, box

    x0, y0 = 500000.0, 5000000.0
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(7)
    pop = rng.integers(0, 30, size=(20, 20)).astype("float32")
    pop[:3, :3] = -1.0  # nodata corner
    grid = write_grid(folder / "pop.tif", pop, x0, y0, 100.0)
    gpkg = folder / "tiny.gpkg"
    gpd.GeoDataFrame(
        {"parcel_id": ["P1", "P2", "P3", "P4"], "cost": [1.0, 1.0, 2.0, 1.0]},
        geometry=[Point(x0 + 300, y0 + 300), Point(x0 + 1700, y0 + 300), Point(x0 + 1000, y0 + 1000), Point(x0 + 1700, y0 + 1700)],
        crs=CRS,
    ).to_file(gpkg, layer="candidates")
    gpd.GeoDataFrame(
        {"station_id": ["S1"], "status": ["kept"], "cost": [0.0]}, geometry=[Point(x0 + 300, y0 + 1700)], crs=CRS
    ).to_file(gpkg, layer="stations")
    gpd.GeoDataFrame(
        {"zone_class": ["A", "X"]},
        geometry=[box(x0 + 900, y0 + 900, x0 + 1100, y0 + 1100), box(x0 + 1600, y0 + 200, x0 + 1800, y0 + 400)],
        crs=CRS,
    ).to_file(gpkg, layer="flood")
    gpd.GeoDataFrame({"name": ["district"]}, geometry=[box(x0, y0, x0 + 2000, y0 + 2000)], crs=CRS).to_file(gpkg, layer="area")
    return {"dir": folder, "grid": grid, "gpkg": gpkg}


@pytest.fixture
def tiny(tmp_path: Path) -> dict[str, Path]:
    """The tiny district of :func:`make_tiny`, in a fresh temp folder."""
    return make_tiny(tmp_path)
