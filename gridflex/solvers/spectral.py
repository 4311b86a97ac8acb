"""Constant-rigidity thin-plate flexure by FFT.

Solves, on a doubly periodic (optionally zero-padded) grid,

    D ∇⁴w − Nx ∂²w/∂x² − Ny ∂²w/∂y² + Δρ g w = q

with w and q positive downward and the in-plane forces Nx, Ny (N m⁻¹) positive in
tension. In Fourier space W = Q / (D k⁴ + Nx kx² + Ny ky² + Δρ g) with the
continuous symbol k⁴ = (kx² + ky²)² (Turcotte & Schubert 2002, *Geodynamics*, ch. 3;
Watts 2001, *Isostasy and Flexure of the Lithosphere*, ch. 3).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from functools import lru_cache

import numpy as np
import scipy.fft

from gridflex.errors import InputError
from gridflex.grid import PADDING_ADVICE, GridSpec, padded_shape, wavenumbers_squared
from gridflex.memory import check_memory
from gridflex.validation import check_number

__all__ = [
    "SpectralProblem",
    "buckling_force",
    "decay_length",
    "scale_spectrum",
    "transfer_function",
]

_BLOCK_ROWS = 32

DEFAULT_PAD_FACTOR = 4.5
"""Zero padding on each side, in decay lengths (flexural parameters). 4.5 keeps the
forebulge height and position within 0.5 % of the infinite-plate solution."""


def buckling_force(rigidity: float, stiffness: float) -> float:
    """Critical compressive in-plane force 2 sqrt(D Δρ g) (N m⁻¹).

    Parameters
    ----------
    rigidity : float
        Flexural rigidity D (N m).
    stiffness : float
        Restoring stiffness Δρ g (Pa m⁻¹).
    """
    return 2.0 * math.sqrt(rigidity * stiffness)


def decay_length(
    rigidity: float, stiffness: float, force_x: float = 0.0, force_y: float = 0.0
) -> float:
    """Length (m) over which the plate's response to a concentrated load decays by e.

    Without in-plane force this is the flexural parameter alpha = (4 D / Δρ g)^(1/4).
    Compression lengthens it: the roots of D k⁴ + N k² + Δρ g give a decay length
    alpha / sqrt(1 − c), with c = −N / (2 sqrt(D Δρ g)) the compression as a fraction
    of the buckling force (derived from the characteristic equation; tension only
    shortens it and is ignored here, which is conservative).
    A plate with D = 0 in tension N > 0 behaves as a membrane of decay length
    sqrt(N / Δρ g).
    """
    compression = max(-force_x, -force_y, 0.0)
    if rigidity == 0.0:
        tension = min(force_x, force_y)
        return math.sqrt(tension / stiffness) if tension > 0 else 0.0
    alpha = (4.0 * rigidity / stiffness) ** 0.25
    ratio = compression / buckling_force(rigidity, stiffness)
    return alpha / math.sqrt(1.0 - ratio)


def _check_buckling(rigidity: float, stiffness: float, force_x: float, force_y: float) -> None:
    compression = max(-force_x, -force_y, 0.0)
    if compression == 0.0:
        return
    limit = buckling_force(rigidity, stiffness)
    if compression >= limit:
        raise InputError(
            f"in-plane compression {compression:.4g} N/m reaches the buckling limit "
            f"2 sqrt(D (rho_m - rho_infill) g) = {limit:.4g} N/m of this plate; "
            "an elastic plate this compressed has no stable solution"
        )


@lru_cache(maxsize=4)
def transfer_function(
    shape: tuple[int, int],
    dy: float,
    dx: float,
    rigidity: float,
    stiffness: float,
    force_x: float = 0.0,
    force_y: float = 0.0,
) -> np.ndarray:
    """Fourier transfer function 1 / (D k⁴ + Nx kx² + Ny ky² + Δρ g) (m Pa⁻¹).

    Cached: solving the same plate on the same grid again reuses it. The returned
    array is read-only.

    Parameters
    ----------
    shape : tuple of int
        Padded grid shape ``(ny, nx)``.
    dy, dx : float
        Spacing (m).
    rigidity : float
        D (N m).
    stiffness : float
        Δρ g (Pa m⁻¹), > 0.
    force_x, force_y : float, default 0
        In-plane forces (N m⁻¹, tension positive).

    Returns
    -------
    numpy.ndarray, shape (ny, nx // 2 + 1)
        Real-valued transfer function for :func:`scipy.fft.rfft2` spectra.
    """
    ky2, kx2 = wavenumbers_squared(shape, dy, dx)
    denom = np.empty((shape[0], kx2.shape[1]), dtype=np.float64)
    # in blocks of rows that stay in cache: a few passes per block, one over memory
    for start in range(0, shape[0], _BLOCK_ROWS):
        block = denom[start : start + _BLOCK_ROWS]
        rows = ky2[start : start + _BLOCK_ROWS]
        np.add(rows, kx2, out=block)
        np.square(block, out=block)
        block *= rigidity
        if force_x:
            block += force_x * kx2
        if force_y:
            block += force_y * rows
        block += stiffness
        np.reciprocal(block, out=block)
    denom.flags.writeable = False
    return denom


def scale_spectrum(
    spectrum: np.ndarray, factor: np.ndarray, out: np.ndarray | None = None
) -> np.ndarray:
    """Multiply a complex half spectrum by a real factor of the same shape.

    Real and imaginary parts are scaled as one float array, which avoids casting
    *factor* to complex. *out* may be *spectrum* itself (in place).
    """
    if out is None:
        out = np.empty_like(spectrum)
    pairs = spectrum.view(np.float64).reshape(*spectrum.shape, 2)
    target = out.view(np.float64).reshape(*out.shape, 2)
    np.multiply(pairs, factor[..., None], out=target)
    return out


@dataclass(frozen=True)
class SpectralProblem:
    """A constant-rigidity problem on a grid, ready to apply to loads.

    Attributes
    ----------
    spec : GridSpec
        The unpadded (output) grid.
    rigidity : float
        D (N m).
    stiffness : float
        Δρ g (Pa m⁻¹).
    force_x, force_y : float
        In-plane forces (N m⁻¹, tension positive).
    shape : tuple of int
        FFT grid shape; equal to the grid shape when periodic.
    periodic : bool
        True for a doubly periodic domain (no padding).
    """

    spec: GridSpec
    rigidity: float
    stiffness: float
    force_x: float
    force_y: float
    shape: tuple[int, int]
    periodic: bool

    @classmethod
    def build(
        cls,
        spec: GridSpec,
        rigidity: float,
        stiffness: float,
        force_x: float = 0.0,
        force_y: float = 0.0,
        periodic: bool = False,
        pad_factor: float = DEFAULT_PAD_FACTOR,
    ) -> SpectralProblem:
        """Check the parameters and choose the FFT grid.

        Raises
        ------
        InputError
            Non-positive stiffness, negative rigidity or pad factor, compression at
            or beyond the buckling limit, or a padded grid that cannot fit in memory.
        """
        if not stiffness > 0:
            raise InputError(
                f"restoring stiffness (rho_m - rho_infill) g must be > 0, got {stiffness!r}"
            )
        check_number("rigidity", rigidity, unit="N m", minimum=0.0)
        check_number("pad_factor", pad_factor, minimum=0.0)
        _check_buckling(rigidity, stiffness, force_x, force_y)
        if periodic:
            shape = spec.shape
        else:
            decay = decay_length(rigidity, stiffness, force_x, force_y)
            shape = padded_shape(spec, pad_factor * decay)
        # peak: padded load, its spectrum, the transfer function, the output grid
        n = shape[0] * shape[1]
        check_memory(
            8.0 * n * 3.5,
            f"spectral solve on a padded grid of {shape[0]} x {shape[1]}",
            advice=PADDING_ADVICE,
        )
        return cls(spec, rigidity, stiffness, force_x, force_y, shape, periodic)

    @property
    def is_local(self) -> bool:
        """True when the response is pointwise (no rigidity, no in-plane force)."""
        return self.rigidity == 0.0 and self.force_x == 0.0 and self.force_y == 0.0

    def transfer(self) -> np.ndarray:
        """The (cached) transfer function on this problem's FFT grid."""
        return transfer_function(
            self.shape,
            self.spec.dy,
            self.spec.dx,
            self.rigidity,
            self.stiffness,
            float(self.force_x),
            float(self.force_y),
        )

    def deflection(
        self, load: np.ndarray, load_magnitude: float | None = None
    ) -> tuple[np.ndarray, float]:
        """Deflection (m, positive down) under *load* (Pa, positive down).

        Parameters
        ----------
        load : numpy.ndarray, shape (ny, nx)
            Vertical stress on the unpadded grid.
        load_magnitude : float, optional
            Σ |q| if the caller has it already (saves a pass over the grid).

        Returns
        -------
        deflection : numpy.ndarray, shape (ny, nx), float64
            w on the unpadded grid.
        force_balance : float
            |Σ Δρ g w − Σ q| / Σ |q| over the whole FFT domain: the global force
            balance, exact to round-off because W(k = 0) = Q(0) / (Δρ g).
        """
        ny, nx = self.spec.shape
        if self.is_local:
            full = np.asarray(load, dtype=np.float64) / self.stiffness
        else:
            spectrum = self.load_spectrum(load)
            scale_spectrum(spectrum, self.transfer(), out=spectrum)
            full = self.inverse(spectrum)
        magnitude = float(np.abs(load).sum()) if load_magnitude is None else load_magnitude
        imbalance = abs(self.stiffness * float(full.sum()) - float(np.sum(load)))
        balance = imbalance / magnitude if magnitude > 0 else 0.0
        return self.crop(full), balance

    def load_spectrum(self, load: np.ndarray) -> np.ndarray:
        """Real-FFT spectrum of *load* zero-padded to this problem's FFT grid.

        Compute it once and reuse it for many plates on the same grid (see
        :meth:`with_rigidity`), e.g. when searching for an elastic thickness.

        Parameters
        ----------
        load : numpy.ndarray, shape (ny, nx)
            Values on the unpadded grid (any unit; Pa for a load).

        Returns
        -------
        numpy.ndarray, complex, shape (ny_fft, nx_fft // 2 + 1)
        """
        ny, nx = self.spec.shape
        if self.periodic:
            padded = np.array(load, dtype=np.float64)
        else:
            padded = np.zeros(self.shape, dtype=np.float64)
            padded[:ny, :nx] = load
        return scipy.fft.rfft2(padded, workers=-1, overwrite_x=True)

    def inverse(self, spectrum: np.ndarray) -> np.ndarray:
        """Field on the whole FFT grid from a half spectrum (*spectrum* is overwritten)."""
        return scipy.fft.irfft2(spectrum, s=self.shape, workers=-1, overwrite_x=True)

    def crop(self, full: np.ndarray) -> np.ndarray:
        """The unpadded window (a contiguous copy) of a field on the FFT grid."""
        ny, nx = self.spec.shape
        if full.shape == (ny, nx):
            return full
        return np.ascontiguousarray(full[:ny, :nx])

    def with_rigidity(self, rigidity: float) -> SpectralProblem:
        """The same FFT grid and forces with another rigidity D (N m).

        The padding is kept, so it must already be wide enough for the stiffest
        plate used (build the problem for the largest rigidity first).

        Raises
        ------
        InputError
            Negative rigidity, or compression at or beyond the new buckling limit.
        """
        check_number("rigidity", rigidity, unit="N m", minimum=0.0)
        _check_buckling(rigidity, self.stiffness, self.force_x, self.force_y)
        return replace(self, rigidity=float(rigidity))

    def wavenumber(self) -> np.ndarray:
        """Radial angular wavenumber |k| (rad m⁻¹) on this problem's half-spectrum grid."""
        ky2, kx2 = wavenumbers_squared(self.shape, self.spec.dy, self.spec.dx)
        return np.sqrt(ky2 + kx2)
