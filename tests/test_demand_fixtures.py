"""Helpers that build tiny rasters and layers for the demand tests, and a check of the helper itself."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np


def write_raster(
    path: Path,
    data: np.ndarray,
    *,
    transform: Any = None,
    crs: str = "EPSG:32626",
    nodata: float | None = None,
    scale: float | None = None,
    offset: float | None = None,
    tiled: bool = False,
    blocksize: int = 16,
    compress: str | None = None,
) -> Path:
    """Write ``data`` (2-D or bands x rows x cols) as a GeoTIFF."""
    import rasterio
    from affine import Affine

    arr = np.asarray(data)
    if arr.ndim == 2:
        arr = arr[None]
    if transform is None:
        transform = Affine(100.0, 0.0, 500000.0, 0.0, -100.0, 4000000.0)
    profile: dict[str, Any] = dict(
        driver="GTiff",
        height=arr.shape[1],
        width=arr.shape[2],
        count=arr.shape[0],
        dtype=arr.dtype,
        crs=crs,
        transform=transform,
        nodata=nodata,
    )
    if tiled:
        profile.update(tiled=True, blockxsize=blocksize, blockysize=blocksize)
    if compress:
        profile["compress"] = compress
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(arr)
        if scale is not None or offset is not None:
            dst.scales = [scale if scale is not None else 1.0] * arr.shape[0]
            dst.offsets = [offset if offset is not None else 0.0] * arr.shape[0]
    return path


def test_write_raster_round_trip(tmp_path):
    import rasterio

    data = np.arange(6, dtype=np.int16).reshape(2, 3)
    path = write_raster(tmp_path / "r.tif", data, nodata=-1, scale=2.0, offset=1.0)
    with rasterio.open(path) as src:
        assert src.read(1).tolist() == data.tolist()
        assert src.nodata == -1 and src.scales == (2.0,) and src.offsets == (1.0,)
        assert src.crs.to_epsg() == 32626
