"""The one entry point for a flexure solve: check the grid, pick the solver, wrap
the answer in an :class:`xarray.Dataset` that records how it was made."""

from __future__ import annotations

import logging
import warnings
from typing import Any

import numpy as np
import xarray as xr

from gridflex.errors import EdgeLoadWarning, InputError
from gridflex.grid import GridSpec, check_grid, check_same_grid
from gridflex.io.provenance import provenance_attrs
from gridflex.loads import load_attrs
from gridflex.plate import Plate
from gridflex.progress import Progress
from gridflex.solvers.finite_difference import (
    DEFAULT_MAX_ITERATIONS,
    DEFAULT_TOLERANCE,
    finite_difference_deflection,
)
from gridflex.solvers.spectral import DEFAULT_PAD_FACTOR, SpectralProblem
from gridflex.validation import check_choice, check_number

__all__ = [
    "EDGES",
    "METHODS",
    "check_edge_load",
    "check_inplane_force",
    "deflection_attrs",
    "result_dataset",
    "solve",
]

log = logging.getLogger(__name__)

METHODS = ("auto", "spectral", "finite-difference")
"""Accepted values of ``solve(method=...)``."""

EDGES = ("infinite", "periodic", "clamped", "free")
"""Accepted values of ``solve(edges=...)``; the spectral solver takes the first two."""

SPECTRAL_EDGES = ("infinite", "periodic")
"""Edges the spectral solver can represent."""

_EDGE_CELLS = 2
_EDGE_WARN_FRACTION = 1e-3


def deflection_attrs() -> dict[str, str]:
    """CF-style attributes of the ``deflection`` variable."""
    return {"units": "m", "long_name": "plate deflection (positive downward)"}


def check_inplane_force(name: str, value: Any) -> float:
    """An in-plane force per unit length (N/m, tension positive): any finite number."""
    return check_number(name, value, unit="N/m, tension positive")


def check_edge_load(values: np.ndarray, total: float) -> None:
    """Warn when a share of the load (of magnitude Σ|q| = *total*) touches the grid edge."""
    if total == 0.0:
        return
    e = _EDGE_CELLS
    strips = (values[:e], values[-e:], values[e:-e, :e], values[e:-e, -e:])
    edge = sum(float(np.abs(strip).sum()) for strip in strips)
    fraction = edge / total
    if fraction > _EDGE_WARN_FRACTION:
        warnings.warn(
            f"{fraction:.1%} of the load lies within {e} cells of the grid edge; the "
            "infinite-plate solve treats the load as ending there. Enlarge the grid, "
            "or use edges='periodic' if the load really repeats.",
            EdgeLoadWarning,
            stacklevel=3,
        )


def result_dataset(
    load: xr.DataArray, deflection: np.ndarray, plate: Plate, attrs: dict[str, Any]
) -> xr.Dataset:
    """Wrap a deflection array in a Dataset on *load*'s grid with provenance attributes.

    Parameters
    ----------
    load : xarray.DataArray
        The load (Pa) that was solved; kept as variable ``load``.
    deflection : numpy.ndarray
        w (m, positive down), same shape as *load*.
    plate : Plate
        The plate used; its parameters go into the attributes.
    attrs : dict
        Solver-specific attributes (method, edges, residuals ...).
    """
    load_var = load.copy(deep=False)
    load_var.attrs = load_attrs()
    data_vars: dict[str, Any] = {
        "deflection": (("y", "x"), deflection, deflection_attrs()),
        "load": load_var.variable,
    }
    coords = {"y": load["y"].variable, "x": load["x"].variable}
    return xr.Dataset(data_vars, coords=coords, attrs=provenance_attrs(plate.describe(), attrs))


def solve(
    load: xr.DataArray,
    plate: Plate,
    method: str = "auto",
    *,
    edges: str = "infinite",
    inplane_force_x: float = 0.0,
    inplane_force_y: float = 0.0,
    pad_factor: float = DEFAULT_PAD_FACTOR,
    tolerance: float = DEFAULT_TOLERANCE,
    max_iterations: int = DEFAULT_MAX_ITERATIONS,
    progress: Progress | None = None,
) -> xr.Dataset:
    """Deflection of an elastic plate under a gridded load.

    Solves

    .. math:: D \\nabla^4 w - N_x \\partial_{xx} w - N_y \\partial_{yy} w
              + (\\rho_m - \\rho_f) g w = q

    with w (m) and q (Pa) positive **downward** and the in-plane forces N (N m⁻¹)
    positive in **tension** (compression negative).

    Parameters
    ----------
    load : xarray.DataArray
        Vertical stress q (Pa, positive downward), dims ``("y", "x")``, with 1-D
        evenly spaced coordinates in metres (increasing or decreasing).
    plate : Plate
        Elastic thickness, moduli and densities.
    method : {"auto", "spectral", "finite-difference"}, default "auto"
        ``"auto"`` uses the FFT solver for a constant te and the finite-difference
        solver (preconditioned conjugate gradients) when ``plate.te`` is a grid;
        ``"finite-difference"`` forces the latter for a constant te too.
    edges : {"infinite", "periodic", "clamped", "free"}, default "infinite"
        ``"infinite"``: the grid is a window onto an infinite plate with no load
        outside it; the load is zero-padded by *pad_factor* decay lengths on each
        side (no wrap-around; for a te grid the edge rigidity continues into the
        margin). ``"periodic"``: the domain repeats (no padding). Finite differences
        only: ``"clamped"`` (w = 0 and zero slope one cell beyond the outermost cell
        centres) and ``"free"`` (the plate ends at the outermost cell centres with
        no moment and no shear).
    inplane_force_x, inplane_force_y : float, default 0
        Horizontal in-plane force per unit length along x and along y (N m⁻¹,
        tension positive). Compression must stay below the buckling limit
        2 sqrt(D (rho_m - rho_f) g).
    pad_factor : float, default 4.5
        Padding on each side in decay lengths (the flexural parameter without
        in-plane force); ignored when periodic.
    tolerance : float, default 1e-6
        Finite differences: relative accuracy of the deflection to reach, as the
        estimated error of w in the energy norm of the discrete plate operator K,
        ||w* − w||_K / ||w*||_K (the default keeps the largest error of w within 1e-6
        of its peak; see
        :func:`~gridflex.solvers.finite_difference.finite_difference_deflection`).
    max_iterations : int, default :data:`~gridflex.solvers.finite_difference.DEFAULT_MAX_ITERATIONS`
        Finite differences: iteration limit.
    progress : callable, optional
        Finite differences: called with (iterations done, iteration limit) after
        each iteration; pass None (the default) for a quiet solve.

    Returns
    -------
    xarray.Dataset
        ``deflection`` (m, positive down) and ``load`` (Pa) on the load's grid;
        attributes record the plate, the solver, ``padded_shape`` (ny, nx) and the
        global force-balance residual ``force_balance_residual``; the
        finite-difference solver adds ``iterations``, ``residual`` (the true
        relative residual ||a q − K w|| / ||a q||, recomputed), ``accuracy`` (the
        estimated relative error of w in the energy norm), ``backward_error`` (the
        normwise backward error ||a q − K w|| / (||K|| ||w|| + ||a q||)),
        ``at_round_off`` (1 when double-precision round-off stopped the iteration
        above *tolerance*), ``tolerance``, ``preconditioner`` (``"band and blend"``,
        ``"blend"``, or ``"aggregation multigrid"`` when the band round sharp rigidity
        changes is over its caps), ``blend_levels``, ``band_nodes``, ``band_width`` and
        ``locally_compensated_load``.

    Raises
    ------
    InputError
        Invalid grid, parameters, or compression beyond buckling.
    ConvergenceError
        The finite-difference iteration did not converge (error estimate above
        *tolerance* at *max_iterations* with a backward error above round-off, or a
        breakdown).

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> x = np.arange(64) * 2e3
    >>> q = xr.DataArray(np.zeros((64, 64)), dims=("y", "x"), coords={"y": x, "x": x})
    >>> q[32, 32] = 1e7
    >>> result = solve(q, Plate(te=10e3))
    >>> result["deflection"].dims
    ('y', 'x')
    """
    if not isinstance(plate, Plate):
        raise InputError(f"plate must be a gridflex.Plate, got {type(plate).__name__}")
    spec = check_grid(load)
    method = check_choice("method", method, METHODS)
    edges = check_choice("edges", edges, EDGES)
    force_x = check_inplane_force("inplane_force_x", inplane_force_x)
    force_y = check_inplane_force("inplane_force_y", inplane_force_y)
    if plate.is_variable:
        assert isinstance(plate.te, xr.DataArray)
        check_same_grid(plate.te, load, "te grid")
    if method == "auto":
        method = "finite-difference" if plate.is_variable else "spectral"
    if method == "finite-difference":
        return _solve_finite_difference(
            load,
            spec,
            plate,
            edges,
            force_x,
            force_y,
            pad_factor,
            tolerance,
            max_iterations,
            progress,
        )
    if plate.is_variable:
        raise InputError(
            "method='spectral' needs a constant te; a te grid needs "
            "method='finite-difference' or 'auto'"
        )
    if edges not in SPECTRAL_EDGES:
        raise InputError(
            f"edges={edges!r} needs method='finite-difference'; the spectral solver "
            f"takes {', '.join(map(repr, SPECTRAL_EDGES))}"
        )
    values = load.values
    problem = SpectralProblem.build(
        spec,
        float(plate.rigidity),
        plate.restoring_stiffness,
        force_x,
        force_y,
        periodic=(edges == "periodic"),
        pad_factor=pad_factor,
    )
    log.info("spectral solve on %s grid, FFT grid %s", spec.shape, problem.shape)
    deflection, balance, magnitude = problem.response(values)
    if edges == "infinite" and not problem.is_local:
        check_edge_load(values, magnitude)  # Σ |q| was summed during the solve
    attrs = {
        "solver": "spectral",
        "spectral_symbol": "continuous",
        "edges": edges,
        "padded_shape": np.array(problem.shape, dtype=np.int64),
        "pad_factor": float(pad_factor) if edges == "infinite" else 0.0,
        "inplane_force_x": force_x,
        "inplane_force_y": force_y,
        "force_balance_residual": balance,
    }
    return result_dataset(load, deflection, plate, attrs)


def _solve_finite_difference(
    load: xr.DataArray,
    spec: GridSpec,
    plate: Plate,
    edges: str,
    force_x: float,
    force_y: float,
    pad_factor: float,
    tolerance: float,
    max_iterations: int,
    progress: Progress | None,
) -> xr.Dataset:
    """The finite-difference branch of :func:`solve`."""
    if force_x or force_y:
        raise InputError(
            "in-plane forces are not available with method='finite-difference' yet; "
            f"got inplane_force_x={force_x!r}, inplane_force_y={force_y!r}"
        )
    values = np.asarray(load.values, dtype=np.float64)
    rigidity_grid = plate.rigidity_grid(spec.shape)
    if edges == "infinite" and rigidity_grid.max() > 0:
        check_edge_load(values, float(np.abs(values).sum()))
    deflection, info = finite_difference_deflection(
        values,
        spec,
        rigidity_grid,
        plate.restoring_stiffness,
        plate.poisson_ratio,
        edges,
        pad_factor=pad_factor,
        tolerance=tolerance,
        max_iterations=max_iterations,
        progress=progress,
    )
    log.info(
        "finite-difference solve: %d iterations, accuracy %.1e, residual %.2e, %s, band %d nodes",
        info["iterations"],
        info["accuracy"],
        info["residual"],
        info["preconditioner"],
        info["band_nodes"],
    )
    attrs = {
        "solver": "finite-difference",
        "edges": edges,
        "padded_shape": np.array(info["solve_shape"], dtype=np.int64),
        "pad_factor": float(pad_factor) if edges == "infinite" else 0.0,
        "inplane_force_x": force_x,
        "inplane_force_y": force_y,
        "force_balance_residual": info["force_balance_residual"],
        "iterations": info["iterations"],
        "residual": info["residual"],
        "accuracy": info["accuracy"],
        "backward_error": info["backward_error"],
        "at_round_off": int(info["at_round_off"]),
        "tolerance": info["tolerance"],
        "preconditioner": info["preconditioner"],
        "blend_levels": np.asarray(info["blend_levels"], dtype=np.float64),
        "band_nodes": info["band_nodes"],
        "band_width": info["band_width"],
        "locally_compensated_load": info["locally_compensated_load"],
    }
    return result_dataset(load, deflection, plate, attrs)
