"""Exception and warning classes of ttmap.

Every error a user can cause is a :class:`TtmapError`. Each subclass also
inherits from the matching builtin so generic handlers keep working. Messages
follow one pattern: what failed, the offending value, then the fix.
"""

from __future__ import annotations

__all__ = [
    "TtmapError",
    "InputDataError",
    "GridError",
    "SourceError",
    "SolverError",
    "OutputExistsError",
    "OutputWriteError",
    "TtmapWarning",
]


class TtmapError(Exception):
    """Base class of every error ttmap raises on purpose."""


class InputDataError(TtmapError, ValueError):
    """A bathymetry array or file, or another input, cannot be used."""


class GridError(TtmapError, ValueError):
    """The grid geometry (transform, CRS, extent) cannot be solved on."""


class SourceError(TtmapError, ValueError):
    """A source lies outside the grid, on land or in a cut-off basin."""


class SolverError(TtmapError, RuntimeError):
    """The eikonal solve failed or was given unusable speeds."""


class OutputExistsError(TtmapError, FileExistsError):
    """An output exists and overwriting was not asked for."""


class OutputWriteError(TtmapError, OSError):
    """Writing the product set failed (e.g. no space left); the folder is as it was."""


class TtmapWarning(UserWarning):
    """Something the user should know about, which did not stop the run."""
