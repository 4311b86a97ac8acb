"""Exceptions and warnings raised by gridflex.

Every error a user can cause is an :class:`InputError`; it is also a
:class:`ValueError`, so code written against the standard library keeps working.
Warnings derive from :class:`GridflexWarning` so that they can be filtered as one
group (``warnings.simplefilter("ignore", gridflex.GridflexWarning)``).
"""

from __future__ import annotations

__all__ = [
    "GridflexError",
    "InputError",
    "ConvergenceError",
    "OutputError",
    "GridflexWarning",
    "CompensationOutsideWarning",
    "EdgeLoadWarning",
    "GravitySeriesWarning",
    "NodataWarning",
]


class GridflexError(Exception):
    """Root of every exception raised on purpose by gridflex."""


class InputError(GridflexError, ValueError):
    """A parameter, grid, file or scenario key has an invalid value.

    The message names the offending item and its value and says what is allowed.
    """


class ConvergenceError(GridflexError, RuntimeError):
    """An iterative solve stopped before reaching its tolerance.

    No result grid is returned (or written) when this is raised.
    """


class OutputError(GridflexError, OSError):
    """An output file could not be written or put in place (full disk, no permission,
    another run took its name meanwhile).

    Nothing of the run is left under a final output name when this is raised; the
    message names the file.
    """


class GridflexWarning(UserWarning):
    """Root of the warnings issued by gridflex."""


class EdgeLoadWarning(GridflexWarning):
    """A load reaches the edge of the grid, where it is cut off by the solver."""


class CompensationOutsideWarning(GridflexWarning):
    """Part of the load's compensation (the moat and bulge) lies beyond the written grid."""


class GravitySeriesWarning(GridflexWarning):
    """The gravity series was cut off before its terms became negligible."""


class NodataWarning(GridflexWarning):
    """Missing (nodata or NaN) cells of an input layer were replaced, as its policy says."""
