"""The edge: reading vector and raster layers, writing GeoPackages atomically.

Only this module and the tools touch paths, GDAL and GeoDataFrames.  Reading
errors name the file and the layer and say what to do; writing goes to a
temporary file in the output folder that is renamed over the target only
when complete, so an interrupted write never leaves a partial GeoPackage
and never harms the previous output.
"""

from __future__ import annotations

import contextlib
import hashlib
import logging
import os
import tempfile
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, Iterator, Mapping

from .errors import CRSError, LayerError, OutputError

if TYPE_CHECKING:  # heavy imports stay out of module import time
    import geopandas as gpd

__all__ = [
    "LayerRef",
    "parse_layer_ref",
    "list_layers",
    "read_vector",
    "to_crs",
    "open_raster",
    "atomic_output",
    "write_layers",
    "file_digest",
]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class LayerRef:
    """A vector layer: a file and, for multi-layer files, the layer's name."""

    path: Path
    layer: str | None = None

    def __str__(self) -> str:
        return f"{self.path}:{self.layer}" if self.layer else str(self.path)


def parse_layer_ref(value: Any, base: Path | None = None) -> LayerRef:
    """``"file.gpkg"``, ``"file.gpkg:layer"`` or a mapping ``{path, layer}`` -> :class:`LayerRef`.

    Relative paths resolve against ``base`` (a study file's folder).

    >>> parse_layer_ref("roads.gpkg:main_roads")
    LayerRef(path=PosixPath('roads.gpkg'), layer='main_roads')
    """
    if isinstance(value, LayerRef):
        ref = value
    elif isinstance(value, Mapping):
        ref = LayerRef(Path(str(value["path"])), value.get("layer"))
    else:
        text = str(value)
        path, layer = text, None
        head, sep, tail = text.rpartition(":")
        # a colon after a one-letter drive ("C:\\data") is not a layer separator
        if sep and head and len(head) > 1 and "/" not in tail and "\\" not in tail and tail:
            path, layer = head, tail
        ref = LayerRef(Path(path), layer)
    if base is not None and not ref.path.is_absolute():
        ref = LayerRef(base / ref.path, ref.layer)
    return ref


def _check_path(path: Path, what: str) -> None:
    if not path.exists():
        raise LayerError(f"{what}: file {path} does not exist; check the path (relative paths start at the study file's folder)")
    if path.is_dir() and path.suffix.lower() not in (".gdb",):
        raise LayerError(f"{what}: {path} is a folder, not a layer; name the file inside it (e.g. a .gpkg or .tif)")
    if path.suffix.lower() == ".zip" or (path.is_file() and zipfile.is_zipfile(path) and path.suffix.lower() not in (".gpkg", ".tif", ".tiff", ".xlsx")):
        raise LayerError(f"{what}: {path} is a zip archive; unpack it and name the layer file inside")


def list_layers(path: Path | str) -> list[str]:
    """Names of the vector layers in a file (not the table of map styles a GeoPackage may hold)."""
    import pyogrio

    try:
        return [str(name) for name, kind in pyogrio.list_layers(str(path)) if not (name == _STYLES_TABLE and kind is None)]
    except Exception as exc:
        raise LayerError(f"{path}: cannot be read as a vector file ({exc}); is it a complete GeoPackage or shapefile?") from None


def read_vector(ref: LayerRef | str, what: str = "layer", allow_empty: bool = False) -> "gpd.GeoDataFrame":
    """Read a vector layer with errors that name the file, the layer and the fix.

    A layer with no CRS is an error (saying how to assign one); an empty
    layer is an error unless ``allow_empty``.
    """
    import geopandas as gpd

    ref = parse_layer_ref(ref)
    _check_path(ref.path, what)
    layers = list_layers(ref.path)
    if ref.layer is None and len(layers) > 1:
        raise LayerError(
            f"{what}: {ref.path} holds {len(layers)} layers ({', '.join(layers)}); name one, e.g. '{ref.path}:{layers[0]}'"
        )
    if ref.layer is not None and ref.layer not in layers:
        raise LayerError(f"{what}: {ref.path} has no layer {ref.layer!r}; its layers are: {', '.join(layers) or 'none'}")
    try:
        # the index is the feature id (fid) a desktop GIS shows, so that messages name features as users see them
        frame = gpd.read_file(
            ref.path, layer=ref.layer or (layers[0] if layers else None), engine="pyogrio", fid_as_index=True
        )
    except Exception as exc:
        raise LayerError(f"{what}: cannot read {ref} ({exc}); is the file complete and a format GDAL reads?") from None
    if frame.crs is None:
        raise CRSError(
            f"{what}: {ref} has no CRS; assign the one it was made in (e.g. in a desktop GIS, or with "
            "`ogr2ogr -a_srs EPSG:XXXX out.gpkg in.gpkg`)"
        )
    if len(frame) == 0 and not allow_empty:
        raise LayerError(f"{what}: {ref} has no features; check the file and the layer name")
    frame.attrs["source"] = str(ref)
    return frame


def to_crs(frame: "gpd.GeoDataFrame", crs: Any, what: str = "layer") -> "gpd.GeoDataFrame":
    """Reproject ``frame`` to ``crs`` when it is in another CRS, and say so."""
    from pyproj import CRS

    target = CRS.from_user_input(crs)
    if frame.crs is not None and CRS.from_user_input(frame.crs).equals(target):
        return frame
    logger.info("%s: reprojecting from %s to %s", what, frame.crs.to_string() if frame.crs else "?", target.to_string())
    out = frame.to_crs(target)
    out.attrs.update(frame.attrs)
    return out


def open_raster(path: Path | str, what: str = "raster") -> Any:
    """Open a raster with rasterio; errors name the file and say what to check."""
    import rasterio

    path = Path(path)
    _check_path(path, what)
    try:
        src = rasterio.open(path)
    except Exception as exc:
        raise LayerError(f"{what}: cannot open {path} as a raster ({exc}); is it a complete GeoTIFF?") from None
    if src.crs is None:
        src.close()
        raise CRSError(f"{what}: {path} has no CRS; assign one with `gdal_edit.py -a_srs EPSG:XXXX {path.name}`")
    return src


def owner_tag() -> str:
    """``HOST-PID`` of this process, put in the names of temporary outputs so that a later run can
    tell the leftovers of a process that was killed (kill -9, a power cut) from those of one at work."""
    import socket

    host = "".join(c if c.isalnum() or c in "-_" else "_" for c in socket.gethostname()) or "host"
    return f"{host}-{os.getpid()}"


def clear_leftovers(folder: Path | str, prefix: str) -> list[Path]:
    """Remove the temporaries named ``PREFIX.HOST-PID.*`` in ``folder`` whose process is gone.

    Only this host's are touched (a folder on a shared disk may hold another
    machine's at work), and only when no process with that id runs here.
    Returns what was removed; what cannot be removed is left, silently.
    """
    import shutil

    host = owner_tag().rsplit("-", 1)[0]
    removed: list[Path] = []
    try:
        entries = list(Path(folder).iterdir())
    except OSError:
        return removed
    for entry in entries:
        rest = entry.name[len(prefix) + 1 :] if entry.name.startswith(prefix + ".") else ""
        tag = rest.split(".", 1)[0]
        if "-" not in tag or tag.rsplit("-", 1)[0] != host or not tag.rsplit("-", 1)[1].isdigit():
            continue
        pid = int(tag.rsplit("-", 1)[1])
        if pid == os.getpid() or _running(pid):
            continue
        with contextlib.suppress(OSError):
            if entry.is_dir() and not entry.is_symlink():
                shutil.rmtree(entry)
            else:
                entry.unlink()
            removed.append(entry)
            logger.info("removed %s, left by an earlier run that was stopped (process %d)", entry, pid)
    return removed


def _running(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # it exists but is not ours (EPERM): it runs
        return True
    return True


@contextlib.contextmanager
def atomic_output(target: Path | str, inputs: tuple[Path, ...] = ()) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; rename it over ``target`` on success.

    On any error (or Ctrl-C) the temporary file is removed and ``target``
    keeps its previous content.  Refuses to overwrite one of ``inputs``.
    """
    target = Path(target).resolve()
    for src in inputs:
        with contextlib.suppress(OSError):
            if Path(src).resolve() == target:
                raise OutputError(f"output {target} is also an input; choose another output folder or name")
    target.parent.mkdir(parents=True, exist_ok=True)
    clear_leftovers(target.parent, f".{target.stem}")
    fd, tmp_name = tempfile.mkstemp(prefix=f".{target.stem}.{owner_tag()}.", suffix=f".tmp{target.suffix}", dir=target.parent)
    os.close(fd)
    tmp = Path(tmp_name)
    tmp.unlink()  # GDAL wants to create the file itself
    try:
        yield tmp
        os.replace(tmp, target)
    finally:
        for leftover in (tmp, Path(str(tmp) + "-journal"), Path(str(tmp) + "-wal"), Path(str(tmp) + "-shm")):
            with contextlib.suppress(FileNotFoundError):
                leftover.unlink()


def write_layers(
    target: Path | str,
    layers: Mapping[str, "gpd.GeoDataFrame"],
    inputs: tuple[Path, ...] = (),
    styles: bool = True,
) -> Path:
    """Write several layers into one GeoPackage, atomically.

    Each layer gets a spatial index (GDAL's default for GeoPackage) and its
    CRS.  ``frame.attrs['description']``, when set, becomes the layer's
    description in the GeoPackage contents table.  With ``styles``, the
    output layers geocover has a map style for (:mod:`geocover.styles`) get
    it as their default style, in a ``layer_styles`` table.
    """
    target = Path(target)
    with atomic_output(target, inputs) as tmp:
        for name, frame in layers.items():
            options = {"SPATIAL_INDEX": "YES"}
            description = frame.attrs.get("description")
            if description:
                options["DESCRIPTION"] = str(description)
            try:
                if hasattr(frame, "geometry"):
                    frame.to_file(tmp, layer=name, driver="GPKG", engine="pyogrio", layer_options=options)
                else:  # an attribute table with no geometry
                    import pyogrio

                    options.pop("SPATIAL_INDEX")
                    pyogrio.write_dataframe(frame, tmp, layer=name, driver="GPKG", layer_options=options)
            except Exception as exc:
                raise OutputError(f"cannot write layer {name!r} to {target}: {exc}") from exc
        if styles and _STYLES_TABLE not in layers:
            _write_styles(tmp, target, layers)
    logger.info("wrote %s (%s)", target, ", ".join(layers))
    return target


_STYLES_TABLE = "layer_styles"  # the table (and its columns) QGIS reads a layer's default style from


def _write_styles(tmp: Path, target: Path, layers: Mapping[str, "gpd.GeoDataFrame"]) -> None:
    """Add the ``layer_styles`` table: one default style (QML and SLD) per styled layer of ``tmp``."""
    import sqlite3

    import pandas as pd
    import pyogrio

    from .styles import STYLE_NAME, layer_style, to_qml, to_sld

    found = {name: layer_style(name, frame) for name, frame in layers.items()}
    styled = {name: style for name, style in found.items() if style is not None}
    if not styled:
        return
    # the geometry column GDAL gave each layer, and when it wrote it, from the GeoPackage's own tables
    # (the time as GDAL stamps it, so that OGR_CURRENT_DATE pins it too)
    with contextlib.closing(sqlite3.connect(f"file:{tmp}?mode=ro", uri=True)) as con:
        columns = dict(con.execute("SELECT table_name, column_name FROM gpkg_geometry_columns").fetchall())
        stamps = dict(con.execute("SELECT table_name, last_change FROM gpkg_contents").fetchall())
    rows = [
        {
            "f_table_catalog": "",
            "f_table_schema": "",
            "f_table_name": name,
            "f_geometry_column": columns[name],
            "styleName": STYLE_NAME,
            "styleQML": to_qml(style),
            "styleSLD": to_sld(style),
            "useAsDefault": True,
            "description": style.title,
            "owner": "",
            "ui": "",
            "update_time": pd.Timestamp(stamps[name]),
        }
        for name, style in styled.items()
        if name in columns
    ]
    if not rows:
        return
    try:
        pyogrio.write_dataframe(
            pd.DataFrame(rows), tmp, layer=_STYLES_TABLE, driver="GPKG",
            layer_options={"DESCRIPTION": "Default map styles of the layers (QGIS QML and OGC SLD 1.1)"},
        )
    except Exception as exc:
        raise OutputError(f"cannot write the layer styles to {target}: {exc}") from exc


def file_digest(path: Path | str, chunk: int = 1 << 20) -> str:
    """SHA-256 of a file, read in chunks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(chunk), b""):
            digest.update(block)
    return digest.hexdigest()
