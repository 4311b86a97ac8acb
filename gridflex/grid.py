"""Checks and helpers for the regular working grid.

The working grid is an :class:`xarray.DataArray` with dims ``("y", "x")`` and 1-D,
evenly spaced cell-centre coordinates in metres (increasing or decreasing).  The
solvers only need the spacing; this module is where that is checked once.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.fft
import xarray as xr

from gridflex.errors import InputError
from gridflex.memory import check_memory
from gridflex.validation import check_number

__all__ = [
    "GridSpec",
    "MIN_CELLS",
    "PADDING_ADVICE",
    "check_grid",
    "check_same_grid",
    "grid_values",
    "padded_shape",
    "wavenumbers_squared",
]

MIN_CELLS = 4
"""Smallest number of cells accepted along each axis."""

_SPACING_RTOL = 1e-6

PADDING_ADVICE = "use a smaller pad_factor or coarser cells (in a scenario: [working_grid] spacing)"
"""What to change when a padded grid does not fit in memory (the default hint)."""


@dataclass(frozen=True)
class GridSpec:
    """Shape and spacing of a regular grid.

    Attributes
    ----------
    ny, nx : int
        Number of cells along y and x.
    dy, dx : float
        Cell size along y and x (m, positive).
    """

    ny: int
    nx: int
    dy: float
    dx: float

    @property
    def shape(self) -> tuple[int, int]:
        """``(ny, nx)``."""
        return (self.ny, self.nx)

    @property
    def cell_area(self) -> float:
        """Area of one cell (m^2)."""
        return self.dx * self.dy


def _axis_spacing(coord: np.ndarray, name: str, label: str) -> float:
    if coord.ndim != 1:
        raise InputError(f"{label}: coordinate {name!r} must be 1-D, got {coord.ndim}-D")
    if coord.size < MIN_CELLS:
        raise InputError(
            f"{label}: grid too small along {name!r}: {coord.size} cells, "
            f"at least {MIN_CELLS} are needed"
        )
    if not np.issubdtype(coord.dtype, np.number) or not np.all(np.isfinite(coord)):
        raise InputError(f"{label}: coordinate {name!r} must be finite numbers (metres)")
    steps = np.diff(coord.astype(np.float64))
    step = float(np.mean(steps))
    if not np.any(steps):
        raise InputError(
            f"{label}: coordinate {name!r} has a spacing of 0 (every value is {coord[0]!r}); "
            "the cells must have a positive size"
        )
    if not np.allclose(steps, step, rtol=_SPACING_RTOL, atol=0.0):
        raise InputError(
            f"{label}: coordinate {name!r} is not evenly spaced "
            f"(steps from {steps.min()!r} to {steps.max()!r} m); "
            "resample the grid onto a regular spacing first"
        )
    return abs(step)


def check_grid(grid: xr.DataArray, label: str = "load") -> GridSpec:
    """Check that *grid* is a finite, regular ``(y, x)`` grid and return its spec.

    Parameters
    ----------
    grid : xarray.DataArray
        Values on dims ``("y", "x")`` with 1-D evenly spaced coordinates (m).
    label : str, default "load"
        Name used for *grid* in error messages.

    Returns
    -------
    GridSpec
        Shape and positive spacing (m).

    Raises
    ------
    InputError
        Wrong type or dims, missing or uneven coordinates, too few cells, NaN or
        infinite values.
    """
    if not isinstance(grid, xr.DataArray):
        raise InputError(f"{label} must be an xarray.DataArray, got {type(grid).__name__}")
    if grid.dims != ("y", "x"):
        raise InputError(
            f"{label} must have dims ('y', 'x') in that order, got {grid.dims!r}; "
            "use .transpose('y', 'x') or rename the dimensions"
        )
    for name in ("y", "x"):
        if name not in grid.coords:
            raise InputError(f"{label} has no coordinate {name!r} (cell centres in metres)")
    dy = _axis_spacing(np.asarray(grid["y"].values), "y", label)
    dx = _axis_spacing(np.asarray(grid["x"].values), "x", label)
    values = grid.values
    if not np.issubdtype(values.dtype, np.number) or np.issubdtype(
        values.dtype, np.complexfloating
    ):
        raise InputError(f"{label} must hold real numbers, got dtype {values.dtype}")
    # one reduction instead of a boolean grid; the full test only if the sum is not finite
    if not np.isfinite(values.sum()) and not np.all(np.isfinite(values)):
        bad = int(np.count_nonzero(~np.isfinite(values)))
        raise InputError(
            f"{label} contains {bad} NaN or infinite value(s); "
            "fill them (a load of 0 where there is no load) before solving"
        )
    return GridSpec(ny=grid.shape[0], nx=grid.shape[1], dy=dy, dx=dx)


def check_same_grid(grid: xr.DataArray, reference: xr.DataArray, label: str) -> None:
    """Raise :class:`InputError` unless *grid* has the dims and coordinates of *reference*."""
    if not isinstance(grid, xr.DataArray) or grid.dims != reference.dims:
        raise InputError(f"{label} must be a DataArray on the load grid, dims {reference.dims!r}")
    for name in reference.dims:
        if grid.sizes[name] != reference.sizes[name] or not np.allclose(
            grid[name].values, reference[name].values, rtol=1e-9, atol=1e-6
        ):
            raise InputError(f"{label} is not on the load grid: coordinate {name!r} differs")


def grid_values(value: object, reference: xr.DataArray, name: str, unit: str = "m") -> np.ndarray:
    """A number or a grid on *reference*'s grid, as a float array of its shape; *unit*
    is the unit of a number, for the message.

    Raises
    ------
    InputError
        If *value* is neither a finite number nor a finite grid on the same grid.
    """
    if isinstance(value, xr.DataArray):
        check_grid(value, name)
        check_same_grid(value, reference, name)
        return np.asarray(value.values, dtype=np.float64)
    number = check_number(name, value, unit=f"{unit}; or a grid")
    return np.full(reference.shape, number)


def padded_shape(
    spec: GridSpec, pad_distance: float, advice: str = PADDING_ADVICE
) -> tuple[int, int]:
    """Padded FFT shape that adds at least *pad_distance* on each side.

    Parameters
    ----------
    spec : GridSpec
        The unpadded grid.
    pad_distance : float
        Margin (m) to add beyond each edge. The shortest wrap-around path between
        a load cell and an output cell then crosses ``2 * pad_distance``.
    advice : str, optional
        What to change when one padded grid cannot fit in memory (for the message).

    Returns
    -------
    tuple of int
        ``(ny, nx)`` rounded up to fast lengths for real FFTs.

    Raises
    ------
    InputError
        A non-finite or negative *pad_distance*, or a padded grid of which one float64
        copy would not fit in memory (sizes are counted in Python integers, so an
        absurd margin is refused with an estimate instead of overflowing).
    """
    if not pad_distance >= 0:  # NaN or negative: a bug of the caller, not too much memory
        raise InputError(f"pad distance must be a number >= 0 (m), got {pad_distance!r}")
    sizes = []
    for n, d in ((spec.ny, spec.dy), (spec.nx, spec.dx)):
        cells = pad_distance / d  # may be inf for a tiny spacing: counted as too many
        extra = 2 * math.ceil(cells) if math.isfinite(cells) and pad_distance > 0 else 0
        sizes.append(n + extra if math.isfinite(cells) else None)
    ny, nx = sizes
    what = (
        f"one padded grid of {spec.ny} x {spec.nx} cells of {spec.dy:.4g} x {spec.dx:.4g} m "
        f"with a margin of {pad_distance:.4g} m"
    )
    cells = ny * nx if ny is not None and nx is not None else math.inf
    check_memory(8 * cells, what, advice=advice)
    assert ny is not None and nx is not None  # a non-finite count was refused just above
    return (
        scipy.fft.next_fast_len(ny, real=True),
        scipy.fft.next_fast_len(nx, real=True),
    )


def wavenumbers_squared(
    shape: tuple[int, int], dy: float, dx: float
) -> tuple[np.ndarray, np.ndarray]:
    """Squared angular wavenumbers for a real 2-D FFT of *shape*.

    Parameters
    ----------
    shape : tuple of int
        ``(ny, nx)`` of the (padded) grid.
    dy, dx : float
        Spacing (m).

    Returns
    -------
    ky2 : numpy.ndarray, shape (ny, 1)
        ``ky**2`` (rad^2 m^-2) for the full axis 0.
    kx2 : numpy.ndarray, shape (1, nx // 2 + 1)
        ``kx**2`` for the half axis 1 of :func:`scipy.fft.rfft2`.
    """
    ny, nx = shape
    ky = 2.0 * np.pi * scipy.fft.fftfreq(ny, dy)
    kx = 2.0 * np.pi * scipy.fft.rfftfreq(nx, dx)
    return (ky * ky)[:, None], (kx * kx)[None, :]
