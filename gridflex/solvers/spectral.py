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
from typing import NamedTuple

import numpy as np
import scipy.fft

from gridflex.errors import InputError
from gridflex.grid import PADDING_ADVICE, GridSpec, padded_shape, wavenumbers_squared
from gridflex.memory import check_memory
from gridflex.solvers.fft_buffers import BlockedSpectralFilter
from gridflex.solvers.row_blocks import for_row_blocks
from gridflex.validation import check_number

__all__ = [
    "SpectralProblem",
    "SpectralResponse",
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
    ny = shape[0]
    denom = np.empty((ny, kx2.shape[1]), dtype=np.float64)
    # rows j and ny - j have the same ky² (fftfreq gives them exactly opposite values):
    # build rows 0 to ny // 2 and copy the rest, mirrored
    unique = ny // 2 + 1

    # in blocks of rows that stay in cache, shared among threads: a few passes per
    # block, one over memory; each block also fills its mirrored rows
    def build(start: int, stop: int, _thread: int) -> None:
        block = denom[start:stop]
        rows = ky2[start:stop]
        np.add(rows, kx2, out=block)
        np.square(block, out=block)
        block *= rigidity
        if force_x:
            block += force_x * kx2
        if force_y:
            block += force_y * rows
        block += stiffness
        np.reciprocal(block, out=block)
        first = max(start, 1)  # row 0 (ky = 0) has no mirror
        if first < stop and ny - stop + 1 < ny - first + 1:
            denom[ny - stop + 1 : ny - first + 1] = block[first - start :][::-1]

    for_row_blocks(unique, _BLOCK_ROWS, build)
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


class SpectralResponse(NamedTuple):
    """What :meth:`SpectralProblem.response` returns."""

    deflection: np.ndarray
    """w (m, positive down) on the unpadded grid, float64."""
    force_balance: float
    """|Σ Δρ g w − Σ q| / Σ |q| over the whole FFT domain (dimensionless)."""
    load_magnitude: float
    """Σ |q| over the grid (Pa, summed over cells)."""


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
        # peak of load_spectrum + inverse: padded load, its spectrum, the transfer function,
        # the output grid (response keeps the spectrum, transfer and output: about 2.5)
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
            Σ |q| to divide the imbalance by, if the caller wants another scale (it is
            otherwise summed while the load is transformed, at no extra pass).

        Returns
        -------
        deflection : numpy.ndarray, shape (ny, nx), float64
            w on the unpadded grid.
        force_balance : float
            |Σ Δρ g w − Σ q| / Σ |q| over the whole FFT domain: the global force
            balance, exact to round-off because W(k = 0) = Q(0) / (Δρ g).
        """
        response = self.response(load, load_magnitude)
        return response.deflection, response.force_balance

    def response(self, load: np.ndarray, load_magnitude: float | None = None) -> SpectralResponse:
        """Deflection under *load* with the force balance and Σ |q| (see :meth:`deflection`).

        The solve is one pass over the load's rows, one over the spectrum's columns and
        one over the output rows, in cache-sized blocks shared among threads
        (:class:`~gridflex.solvers.fft_buffers.BlockedSpectralFilter`): each block of
        load rows is copied into a zero-padded row buffer, summed (Σ q and Σ |q|) and
        transformed along x; each block of spectrum columns is transformed along y,
        multiplied by the transfer function and transformed back; each block of output
        rows is transformed back along x straight into the unpadded result. The padded
        grid never exists in real space, and the rows of zero padding are never
        transformed along x (the transform runs on the data rows only). Σ w over the
        FFT domain is the k = 0 term of the row spectra after the inverse column
        transforms (Σ_x of a row is its rfft at k = 0), read without another pass.

        Parameters
        ----------
        load : numpy.ndarray, shape (ny, nx)
            Vertical stress (Pa, positive down) on the unpadded grid.
        load_magnitude : float, optional
            Σ |q| to use for the force balance instead of the one summed here.

        Returns
        -------
        SpectralResponse
        """
        ny, nx = self.spec.shape
        load = np.asarray(load)
        if load.shape != (ny, nx):
            raise InputError(f"load has shape {load.shape}, the problem's grid is {(ny, nx)}")
        if self.is_local:
            deflection = np.asarray(load, dtype=np.float64) / self.stiffness
            total, magnitude = float(np.sum(load)), float(np.abs(load).sum())
            deflection_sum = float(deflection.sum())
        else:
            transfer = self.transfer()
            fft = BlockedSpectralFilter((ny, nx), self.shape)

            def forward(j0: int, j1: int, thread: int) -> tuple[float, float]:
                rows = fft.row_buffer(thread, j1 - j0)
                rows[...] = load[j0:j1]
                sums = float(rows.sum()), float(np.abs(rows).sum())
                fft.forward_rows(j0, j1, thread)
                return sums

            sums = for_row_blocks(ny, fft.rows, forward)
            total = sum(block[0] for block in sums)
            magnitude = sum(block[1] for block in sums)
            fft.filter_columns(transfer)
            deflection_sum = float(fft.spectrum[:, 0].real.sum())
            deflection = np.empty((ny, nx), dtype=np.float64)

            def inverse(j0: int, j1: int, thread: int) -> None:
                deflection[j0:j1] = fft.inverse_rows(j0, j1, thread)

            for_row_blocks(ny, fft.rows, inverse)
        if load_magnitude is not None:
            magnitude = load_magnitude
        imbalance = abs(self.stiffness * deflection_sum - total)
        balance = imbalance / magnitude if magnitude > 0 else 0.0
        return SpectralResponse(deflection, balance, magnitude)

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
