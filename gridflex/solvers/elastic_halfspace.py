"""Surface displacement of an elastic half-space under a vertical surface load.

Boussinesq's solution (Timoshenko & Goodier 1951, *Theory of Elasticity*, section on the
semi-infinite solid): a vertical point force P on the surface of a homogeneous, isotropic
elastic half-space (Young's modulus E, Poisson's ratio ν) moves the surface down by

    w(r) = (1 − ν²) P / (π E r)

(its 2-D Fourier transform is 2 (1 − ν²) / (E k), the symbol often quoted). The kernel
decays only like 1 / r, so a periodic FFT with the symbol would add the fields of all
periodic copies of the load (and has no finite k = 0 value). Instead the kernel is built
in real space and the convolution is done on a grid of at least 2 n − 1 cells per axis
with the kernel cut to offsets below n: a free-space (linear, not circular) convolution,
exact on the window. Each cell's load is taken as uniform over the cell, so the kernel
entry of an offset is (1 − ν²) / (π E) times the integral of 1 / r over that cell,
in closed form (the singular centre included):

    ∫∫ dx dy / r = F(x2, y2) − F(x1, y2) − F(x2, y1) + F(x1, y1),
    F(x, y) = sign(x) sign(y) (|x| asinh(|y| / |x|) + |y| asinh(|x| / |y|))

(F is the integral from the origin, 0 on the axes; the integral of 1 / r from (0, 0) to
(x, y) for x, y > 0 is the bracket, checked against quadrature in the tests).

w and the load are positive down; numpy arrays in SI units.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.fft

from gridflex.grid import GridSpec
from gridflex.memory import check_memory
from gridflex.solvers.viscous import padded_forward, window_inverse
from gridflex.validation import check_number

__all__ = ["ElasticHalfSpace", "cell_inverse_distance", "check_elastic_moduli"]


def check_elastic_moduli(youngs_modulus: float, poisson_ratio: float) -> tuple[float, float]:
    """*youngs_modulus* (Pa, > 0) and *poisson_ratio* (in (0, 0.5]; 0.5 is incompressible)
    checked.

    Raises
    ------
    InputError
        Naming the argument and its value.
    """
    e = check_number("youngs_modulus", youngs_modulus, unit="Pa", minimum=0.0, strict=True)
    nu = check_number("poisson_ratio", poisson_ratio, minimum=0.0, maximum=0.5, strict=True)
    return e, nu


def _corner_integral(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """The integral of 1 / r over the rectangle from (0, 0) to (x, y), any signs:
    sign(x) sign(y) F(|x|, |y|), F(x, y) = x asinh(y / x) + y asinh(x / y), 0 on the axes."""
    ax, ay = np.abs(x), np.abs(y)
    with np.errstate(divide="ignore", invalid="ignore"):
        first = np.where(ax > 0, ax * np.arcsinh(ay / np.where(ax > 0, ax, 1.0)), 0.0)
        second = np.where(ay > 0, ay * np.arcsinh(ax / np.where(ay > 0, ay, 1.0)), 0.0)
    return np.sign(x) * np.sign(y) * (first + second)


def cell_inverse_distance(ny: int, nx: int, dy: float, dx: float) -> np.ndarray:
    """Integral of 1 / r (m) over the cell at each offset (i dy, j dx), i < ny, j < nx,
    from the centre of the cell at offset 0 (the first quadrant; the kernel is even).

    Examples
    --------
    The centre cell of a square grid: 4 asinh(1) dx (the integral of 1/r over a square
    of side dx about its centre):

    >>> round(float(cell_inverse_distance(2, 2, 1.0, 1.0)[0, 0]), 6)
    3.525494
    """
    ys = (np.arange(ny + 1) - 0.5) * dy
    xs = (np.arange(nx + 1) - 0.5) * dx
    corners = _corner_integral(xs[None, :], ys[:, None])
    return corners[1:, 1:] - corners[:-1, 1:] - corners[1:, :-1] + corners[:-1, :-1]


@dataclass
class ElasticHalfSpace:
    """Free-space convolution with the Boussinesq kernel on a grid.

    Attributes
    ----------
    spec : GridSpec
        The output (and load) grid.
    shape : tuple of int
        FFT grid, at least 2 n − 1 per axis.
    transfer : numpy.ndarray
        Real half spectrum of the cut, wrapped kernel (m Pa⁻¹ per cell load).
    """

    spec: GridSpec
    shape: tuple[int, int]
    transfer: np.ndarray

    @classmethod
    def build(
        cls,
        spec: GridSpec,
        youngs_modulus: float,
        poisson_ratio: float,
        shape: tuple[int, int] | None = None,
    ) -> ElasticHalfSpace:
        """Kernel spectrum on *shape* (by default the smallest fast size >= 2 n − 1).

        Raises
        ------
        InputError
            Bad moduli, a *shape* below 2 n − 1, or not enough memory.
        """
        e, nu = check_elastic_moduli(youngs_modulus, poisson_ratio)
        ny, nx = spec.shape
        if shape is None:
            shape = (
                scipy.fft.next_fast_len(2 * ny - 1, real=True),
                scipy.fft.next_fast_len(2 * nx - 1, real=True),
            )
        if shape[0] < 2 * ny - 1 or shape[1] < 2 * nx - 1:
            raise ValueError(f"FFT shape {shape} below 2 n - 1 of the grid {spec.shape}")
        check_memory(
            8.0 * shape[0] * shape[1] * 4.0,
            f"elastic half-space convolution on {shape[0]} x {shape[1]} cells",
        )
        quadrant = cell_inverse_distance(ny, nx, spec.dy, spec.dx) * ((1.0 - nu * nu) / (np.pi * e))
        kernel = np.zeros(shape)
        kernel[:ny, :nx] = quadrant
        kernel[shape[0] - ny + 1 :, :nx] = quadrant[:0:-1, :]
        kernel[:, shape[1] - nx + 1 :] = kernel[:, nx - 1 : 0 : -1]
        transfer = np.ascontiguousarray(scipy.fft.rfft2(kernel, workers=-1).real)
        return cls(spec, shape, transfer)

    def spectrum_response(self, spectrum: np.ndarray) -> np.ndarray:
        """Displacement (m) on the window from a load spectrum on :attr:`shape`."""
        return window_inverse(spectrum * self.transfer, self.shape, self.spec.shape)

    def response(self, load: np.ndarray) -> np.ndarray:
        """Surface displacement (m, positive down) under *load* (Pa, positive down)."""
        return self.spectrum_response(padded_forward(load, self.shape))
