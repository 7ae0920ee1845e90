"""Parameter types shared by the command line, the Python API and study files.

A parameter type converts a raw value (a CLI string, a TOML value or a
Python object) into the value the tool works with.  Converting a value that
is already converted returns it unchanged, so the same converter serves all
three front ends.  Errors are :class:`~geocover.errors.ParameterError` with
the parameter's name.

>>> Distance("limit").convert("5 km", Context())
5000.0
>>> Distance("limit").convert(5000.0, Context())
5000.0
"""

from __future__ import annotations

import difflib
import enum
import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

from ..errors import ParameterError
from ..units import parse_distance, parse_duration, parse_fraction

__all__ = [
    "REQUIRED",
    "Context",
    "Param",
    "VectorLayer",
    "Raster",
    "FieldName",
    "Distance",
    "Metres",
    "Duration",
    "Number",
    "Share",
    "Choice",
    "Flag",
    "Text",
    "OutputPath",
    "OutputFolder",
    "ExclusionList",
    "IntList",
    "suggest",
]


class _Required:
    def __repr__(self) -> str:
        return "REQUIRED"


REQUIRED: Any = _Required()


@dataclass(frozen=True)
class Context:
    """Where relative paths resolve and where outputs may go."""

    base_dir: Path | None = None
    out_dir: Path | None = None

    def resolve(self, path: Path) -> Path:
        if self.base_dir is not None and not path.is_absolute():
            return self.base_dir / path
        return path


def suggest(word: str, options: Sequence[str]) -> str:
    """A ``" (did you mean 'x'?)"`` hint, or an empty string."""
    close = difflib.get_close_matches(word, list(options), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


@dataclass(frozen=True)
class Param:
    """A tool parameter: a name, a help text, a default and a converter."""

    name: str
    help: str = ""
    default: Any = REQUIRED
    type_name: str = "value"
    unit: str = ""

    @property
    def required(self) -> bool:
        return self.default is REQUIRED

    @property
    def cli_name(self) -> str:
        return "--" + self.name.replace("_", "-")

    def convert(self, value: Any, ctx: Context) -> Any:  # pragma: no cover - overridden
        raise NotImplementedError

    def fail(self, message: str) -> ParameterError:
        return ParameterError(f"parameter '{self.name}': {message}", self.name)

    def describe_default(self) -> str:
        if self.required:
            return "required"
        if self.default is None:
            return "none"
        if isinstance(self.default, enum.Enum):
            return str(self.default.value)
        return str(self.default)


@dataclass(frozen=True)
class VectorLayer(Param):
    """A vector layer: ``file.gpkg`` or ``file.gpkg:layer`` (or a mapping with path and layer)."""

    type_name: str = "vector layer"

    def convert(self, value: Any, ctx: Context) -> Any:
        from ..layers import LayerRef, parse_layer_ref

        if value is None:
            return None
        if hasattr(value, "geometry") and hasattr(value, "crs"):  # a GeoDataFrame, from the Python API
            return value
        if isinstance(value, LayerRef):
            ref = value
        elif isinstance(value, (str, Path, dict)):
            if isinstance(value, dict) and "path" not in value:
                raise self.fail(f"a layer table needs a 'path' key, got keys {sorted(value)}")
            ref = parse_layer_ref(value)
        else:
            raise self.fail(f"expected a layer such as 'file.gpkg:layer', got {type(value).__name__}")
        ref = LayerRef(ctx.resolve(ref.path), ref.layer)
        if not ref.path.exists():
            raise self.fail(f"file {ref.path} does not exist; check the path (relative paths start at the study file's folder)")
        return ref


@dataclass(frozen=True)
class Raster(Param):
    """A raster file (GeoTIFF or anything GDAL reads)."""

    type_name: str = "raster"

    def convert(self, value: Any, ctx: Context) -> Any:
        if value is None:
            return None
        if not isinstance(value, (str, Path)):
            raise self.fail(f"expected a raster path, got {type(value).__name__}")
        path = ctx.resolve(Path(value))
        if not path.exists():
            raise self.fail(f"file {path} does not exist; check the path")
        if path.is_dir():
            raise self.fail(f"{path} is a folder; name the raster file inside it")
        return path


_IDENT = re.compile(r"^[A-Za-z_][A-Za-z0-9_ .-]*$")


@dataclass(frozen=True)
class FieldName(Param):
    """The name of an attribute field."""

    type_name: str = "field"

    def convert(self, value: Any, ctx: Context) -> Any:
        if value is None:
            return None
        if not isinstance(value, str) or not _IDENT.match(value):
            raise self.fail(f"{value!r} is not a field name")
        return value


@dataclass(frozen=True)
class Text(Param):
    """Free text (a label, an attribute filter, a CRS)."""

    type_name: str = "text"

    def convert(self, value: Any, ctx: Context) -> Any:
        if value is None:
            return None
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            return str(value)
        if not isinstance(value, str):
            raise self.fail(f"expected text, got {type(value).__name__}")
        return value


class Metres(float):
    """A distance in metres that remembers whether the user wrote a unit.

    A bare number is read as metres; with geographic inputs that may have
    been meant in degrees, so the tools refuse it there (see
    :func:`geocover.toolbox.checks.check_distance_units`).
    """

    unitless: bool = False

    def __new__(cls, value: float, unitless: bool = False) -> "Metres":
        obj = super().__new__(cls, value)
        obj.unitless = unitless
        return obj


def _has_unit(value: Any) -> bool:
    return isinstance(value, str) and any(ch.isalpha() for ch in value)


@dataclass(frozen=True)
class Distance(Param):
    """A distance with a unit, e.g. ``5 km``; stored in metres (a bare number is metres)."""

    type_name: str = "distance"
    unit: str = "m"
    minimum: float = 0.0
    allow_zero: bool = False

    def convert(self, value: Any, ctx: Context) -> Any:
        if value is None:
            return None
        if isinstance(value, Metres):
            return value
        metres = parse_distance(value, "m", self.name)
        if metres < self.minimum or (metres == 0 and not self.allow_zero):
            raise self.fail(f"must be {'zero or ' if self.allow_zero else ''}more than 0 m, got {value!r}")
        return Metres(metres, unitless=not _has_unit(value))


@dataclass(frozen=True)
class Duration(Param):
    """A duration with a unit, e.g. ``8 min``; stored in seconds."""

    type_name: str = "duration"
    unit: str = "s"
    allow_zero: bool = False

    def convert(self, value: Any, ctx: Context) -> Any:
        if value is None:
            return None
        seconds = parse_duration(value, "s", self.name)
        if seconds < 0 or (seconds == 0 and not self.allow_zero):
            raise self.fail(f"must be more than 0 s, got {value!r}")
        return seconds


@dataclass(frozen=True)
class Number(Param):
    """A number in a range; ``integer=True`` for counts."""

    type_name: str = "number"
    minimum: float | None = None
    maximum: float | None = None
    integer: bool = False

    def convert(self, value: Any, ctx: Context) -> Any:
        if value is None:
            return None
        if isinstance(value, bool):
            raise self.fail(f"expected a number, got {value!r}")
        try:
            number = float(value)
        except (TypeError, ValueError):
            raise self.fail(f"expected a number, got {value!r}") from None
        if not math.isfinite(number):  # TOML allows nan and inf; int(inf) would raise OverflowError
            raise self.fail(f"expected a finite number, got {value!r}")
        if self.integer:
            if number != int(number):
                raise self.fail(f"expected a whole number, got {value!r}")
            number = int(number)
        if self.minimum is not None and number < self.minimum:
            raise self.fail(f"must be at least {self.minimum:g}, got {value!r}")
        if self.maximum is not None and number > self.maximum:
            raise self.fail(f"must be at most {self.maximum:g}, got {value!r}")
        return number


@dataclass(frozen=True)
class Share(Param):
    """A share of the population, e.g. ``95 %`` or ``0.95``; stored as a fraction."""

    type_name: str = "share"
    unit: str = "%"

    def convert(self, value: Any, ctx: Context) -> Any:
        if value is None:
            return None
        return parse_fraction(value, self.name)


@dataclass(frozen=True)
class Choice(Param):
    """One of a named enum's values; a wrong value lists the valid ones."""

    choices: type[enum.Enum] | None = None
    type_name: str = "choice"

    def convert(self, value: Any, ctx: Context) -> Any:
        assert self.choices is not None
        if value is None:
            return None
        if isinstance(value, self.choices):
            return value
        valid = [str(c.value) for c in self.choices]
        text = str(value).strip().lower()
        for choice in self.choices:
            if str(choice.value).lower() == text:
                return choice
        raise self.fail(f"{value!r} is not one of: {', '.join(valid)}{suggest(text, valid)}")


@dataclass(frozen=True)
class Flag(Param):
    """On or off."""

    type_name: str = "flag"
    default: Any = False

    def convert(self, value: Any, ctx: Context) -> Any:
        if isinstance(value, bool):
            return value
        text = str(value).strip().lower()
        if text in ("1", "true", "yes", "on"):
            return True
        if text in ("0", "false", "no", "off"):
            return False
        raise self.fail(f"expected true or false, got {value!r}")


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.resolve().relative_to(folder.resolve())
        return True
    except ValueError:
        return False


@dataclass(frozen=True)
class OutputPath(Param):
    """An output file; a relative path stays inside the output folder (no escaping through ``..``)."""

    type_name: str = "output file"
    suffix: str = ".gpkg"

    def convert(self, value: Any, ctx: Context) -> Any:
        if value is None:
            return None
        if not isinstance(value, (str, Path)):
            raise self.fail(f"expected a file path, got {type(value).__name__}")
        raw = Path(value)
        if raw.suffix.lower() != self.suffix:
            raise self.fail(f"{raw} should end in {self.suffix}")
        if raw.is_absolute():
            return raw
        folder = ctx.out_dir or ctx.base_dir or Path.cwd()
        path = folder / raw
        if ".." in raw.parts and not _inside(path, folder):
            raise self.fail(f"{raw} would leave the output folder {folder}; give an absolute path to write elsewhere")
        return path


@dataclass(frozen=True)
class OutputFolder(Param):
    """An output folder (created when missing)."""

    type_name: str = "output folder"

    def convert(self, value: Any, ctx: Context) -> Any:
        if value is None:
            return None
        if not isinstance(value, (str, Path)):
            raise self.fail(f"expected a folder path, got {type(value).__name__}")
        raw = Path(value)
        if raw.is_absolute():
            path = raw
        else:
            base = ctx.base_dir or Path.cwd()
            path = base / raw
            if ".." in raw.parts and not _inside(path, base):
                raise self.fail(f"{raw} would leave the folder {base}; give an absolute path to write elsewhere")
        if path.exists() and not path.is_dir():
            raise self.fail(f"{path} exists and is not a folder")
        return path


@dataclass(frozen=True)
class IntList(Param):
    """A list of whole numbers, e.g. land-use class codes ``1,2,3``."""

    type_name: str = "list of integers"

    def convert(self, value: Any, ctx: Context) -> Any:
        if value is None:
            return None
        items: Sequence[Any]
        if isinstance(value, str):
            items = [v for v in re.split(r"[,\s]+", value.strip()) if v]
        elif isinstance(value, (list, tuple)):
            items = value
        else:
            items = [value]
        out = []
        for item in items:
            try:
                number = float(item)
            except (TypeError, ValueError):
                raise self.fail(f"{item!r} is not a whole number") from None
            if number != int(number):
                raise self.fail(f"{item!r} is not a whole number")
            out.append(int(number))
        return tuple(out)


@dataclass(frozen=True)
class ExclusionList(Param):
    """Exclusion zones: a list of layers, each with an optional setback and filter.

    On the command line each zone is one string, repeated per zone::

        --exclude "zones.gpkg:flood_zones; setback=50 m; where=zone_class in ('A', 'AE')"

    In a study file each zone is a table ``{layer = "...", setback = "50 m", where = "..."}``.
    """

    type_name: str = "exclusion zones"
    default: Any = ()

    def _one(self, value: Any, ctx: Context) -> Any:
        from ..sites import Exclusion

        if isinstance(value, Exclusion):
            return value
        if isinstance(value, str):
            parts = [p.strip() for p in value.split(";") if p.strip()]
            if not parts:
                raise self.fail("an exclusion needs a layer")
            spec: dict[str, Any] = {"layer": parts[0]}
            for part in parts[1:]:
                key, sep, rest = part.partition("=")
                if not sep:
                    raise self.fail(f"cannot read {part!r}; write key=value (setback=50 m, where=..., name=...)")
                spec[key.strip()] = rest.strip()
        elif isinstance(value, dict):
            spec = dict(value)
        else:
            raise self.fail(f"expected a layer or a table, got {type(value).__name__}")
        allowed = {"layer", "setback", "where", "name"}
        unknown = set(spec) - allowed
        if unknown:
            key = sorted(unknown)[0]
            raise self.fail(f"unknown key {key!r} in an exclusion{suggest(key, sorted(allowed))}; keys: {', '.join(sorted(allowed))}")
        if "layer" not in spec:
            raise self.fail("an exclusion needs a 'layer'")
        layer = VectorLayer(self.name).convert(spec["layer"], ctx)
        setback = Distance(self.name, allow_zero=True).convert(spec.get("setback", 0.0), ctx)
        return Exclusion(layer, setback_m=setback, where=spec.get("where"), name=spec.get("name"))

    def convert(self, value: Any, ctx: Context) -> Any:
        if value is None:
            return ()
        if isinstance(value, (list, tuple)):
            return tuple(self._one(v, ctx) for v in value)
        return (self._one(value, ctx),)

