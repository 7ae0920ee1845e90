"""Versions of geocover and the libraries it stands on (for --version and manifests)."""

from __future__ import annotations

import importlib.metadata
import platform
import sys
from typing import Any

__all__ = ["show_versions", "versions_text"]


def _dist(name: str) -> str | None:
    try:
        return importlib.metadata.version(name)
    except importlib.metadata.PackageNotFoundError:
        return None


def show_versions(native: bool = True) -> dict[str, Any]:
    """Library versions; with ``native`` also GDAL, PROJ, GEOS and the CBC solver library.

    ``native=False`` reads package metadata only and imports nothing heavy.
    """
    from . import __version__

    info: dict[str, Any] = {
        "geocover": __version__,
        "python": sys.version.split()[0],
        "platform": platform.platform(),
    }
    for name in ("numpy", "scipy", "shapely", "pyproj", "geopandas", "pyogrio", "rasterio", "rtree", "mip", "matplotlib", "click"):
        info[name] = _dist(name)
    if native:
        try:
            import rasterio

            info["gdal"] = rasterio.__gdal_version__
        except Exception as exc:  # a broken GDAL should not break --version
            info["gdal"] = f"unavailable ({exc})"
        try:
            import pyproj

            info["proj"] = pyproj.proj_version_str
        except Exception as exc:
            info["proj"] = f"unavailable ({exc})"
        try:
            import shapely

            info["geos"] = shapely.geos_version_string
        except Exception as exc:
            info["geos"] = f"unavailable ({exc})"
        info["cbc"] = _cbc_version()
    return info


def _cbc_version() -> str:
    """The CBC library python-mip loads (shipped in its wheel or the cbcbox wheel)."""
    try:
        import mip.cbc

        box = _dist("cbcbox")
        where = mip.cbc.libfile if hasattr(mip.cbc, "libfile") else "bundled"
        return f"cbcbox {box} ({where})" if box else str(where)
    except Exception as exc:
        return f"unavailable ({type(exc).__name__}: {exc})"


def versions_text(native: bool = True) -> str:
    return "\n".join(f"{k}: {v}" for k, v in show_versions(native).items())
