"""One error root for geocover.

Every error the package raises on purpose derives from :class:`GeocoverError`.
Errors caused by what the user passed in (a layer, a field, a parameter, a
study file) also derive from :class:`ValueError`, so callers that already
catch ``ValueError`` keep working.  Messages name the thing that is wrong and
say how to fix it.
"""

from __future__ import annotations

__all__ = [
    "GeocoverError",
    "InputError",
    "LayerError",
    "CRSError",
    "ParameterError",
    "StudyFileError",
    "SolverError",
    "OutputError",
]


class GeocoverError(Exception):
    """Root of every error geocover raises on purpose."""


class InputError(GeocoverError, ValueError):
    """Something the user supplied cannot be used as it is."""


class LayerError(InputError):
    """A vector or raster layer is missing, unreadable, empty or malformed."""


class CRSError(InputError):
    """A coordinate reference system is missing, unsuitable or inconsistent."""


class ParameterError(InputError):
    """A tool parameter has a wrong type or value.

    Parameters
    ----------
    message : str
        What is wrong and how to fix it.
    param : str, optional
        The parameter's name, as the user typed it.
    """

    def __init__(self, message: str, param: str | None = None) -> None:
        super().__init__(message)
        self.param = param


class StudyFileError(InputError):
    """A study file has an unknown key, a wrong type or a bad path."""


class SolverError(GeocoverError):
    """The solver could not be started or failed without a usable plan."""


class OutputError(GeocoverError):
    """An output could not be written (the previous output is left intact)."""
