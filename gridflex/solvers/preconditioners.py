"""Preconditioners for the variable-rigidity plate operator.

Two parts, combined in symmetric multiplicative form (band, blend on the rest of the
residual, band again; the first band solve drops out once the residual is zero on the band,
see :meth:`MultiplicativePreconditioner.apply`):

* :class:`BlendPreconditioner` — a partition of unity over log D: constant-rigidity spectral
  solves at a few rigidity levels spread over the non-zero range, each applied as
  ``C_l P_l C_l`` with ``C_l = cos`` / ``sin`` of a ramp in log D (so that the squares sum
  to 1) times a diagonal scaling ``(D_l / D)^(p/2)`` (:data:`RIGIDITY_SCALING`); the sum is
  symmetric positive definite. ``P_l`` divides the spectrum by the exact
  discrete symbol ``D_l s(k)² + Δρ g`` of the 13-point operator (PHYSICS.md section 2.2).
* :class:`BandSolver` — an exact sparse LU solve of the operator restricted to a band of
  nodes round every sharp feature (rigidity changing more than ten-fold between neighbours,
  zero-rigidity breaks, non-periodic grid edges), widened by a distance in metres.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np
import scipy.fft
import scipy.ndimage
import scipy.sparse
import scipy.sparse.linalg as spla

from gridflex.memory import check_memory
from gridflex.solvers.fft_buffers import BlockedSpectralFilter
from gridflex.solvers.plate_operator import PlateOperator
from gridflex.solvers.row_blocks import block_rows, dot, for_row_blocks, thread_count

__all__ = [
    "BandSolver",
    "BlendPreconditioner",
    "MultiplicativePreconditioner",
    "PlatePreconditioner",
    "band_is_exact",
    "discrete_symbol",
    "rigidity_scaling",
    "scaled_start",
    "smooth_like_gaussian",
    "symmetric_factor",
]

log = logging.getLogger(__name__)

LEVEL_SPACING = 1000.0
"""Largest rigidity ratio between neighbouring blend levels: 2 levels for a 1000-fold range
(a factor-10 Te contrast), 3 for up to a million-fold. Measured on the benchmark's smooth
margin (tests/benchmarks/variable.py, Te 6 -> 60 km, tanh of half-width 80 km, 256² cells of
4 km), iterations to a true relative residual of 1e-8: without :data:`RIGIDITY_SCALING`
2 levels 84, 3 levels (ratio 31.6) 34, 4 levels 51; with the scaling 2 levels 24, 3 levels 28.
Two levels also mean one FFT pair less per iteration."""

LEVELS_COUNTED = 3
"""Blend levels the finite-difference solve's first memory check counts
(:data:`gridflex.solvers.finite_difference.GRID_ARRAYS`); more are checked when known."""

RIGIDITY_SCALING = (0.25, 0.65)
"""Exponent p of the diagonal scaling (D_l / D)^(p/2) applied to each level's weight, D the
(smoothed) local rigidity, at a level ratio of 10^1.5 and of 10^3; in between and beyond, p
follows log10 of the ratio linearly (clipped to [0, 0.65]).

With p = 0 a node between two levels gets cos² / D₁ + sin² / D₂ at short wavelengths, more
than 1 / D; with p = 1 it gets 1 / D there but the long-wavelength (buoyancy) part is off by
as much instead; p between balances the two, and the wider the level spacing, the more
scaling it needs. Costs nothing per iteration (it folds into the weights) and keeps the
blend symmetric positive definite. Measured on the smooth margin above: 3 levels (ratio 31.6)
p = 0 34 iterations, 0.15 29, 0.25 28, 0.35 29, 0.5 30, 0.75 37, 1 50; 2 levels (ratio 1000)
p = 0 84, 0.4 35, 0.5 28, 0.6 24, 0.65 24, 0.7 24, 0.8 27. On the step-plus-break of
tests/test_finite_difference.py at 64², 128², 256²: unscaled 3 levels 13, 17, 25; 3 levels
p = 0.25 12, 15, 17; 2 levels p = 0.65 15, 18, 19."""


def rigidity_scaling(ratio: float) -> float:
    """Scaling exponent p (:data:`RIGIDITY_SCALING`) for neighbouring levels *ratio* apart."""
    (p_low, p_high), (r_low, r_high) = RIGIDITY_SCALING, (1.5, 3.0)
    t = (math.log10(ratio) - r_low) / (r_high - r_low)
    return min(max(p_low + t * (p_high - p_low), 0.0), p_high)


MIN_RAMP_RATIO = 2.0
"""Least rigidity ratio over which the blend's weights ramp from one level to the next.

The levels span the rigidity outside the band. Where that is nearly constant (a band
covering every weaker part of the plate), two levels a hair apart made the cos/sin ramp a
step in space, and a step cuts the plate's coupling across it: Σ_l C_l(x) C_l(y) =
cos(θ(x) − θ(y)) is 0 for nodes x, y on either side. Measured on a Gaussian te valley
(25 -> 3 km, 30 km half-width, 60 km west of the centre; tests/benchmarks/variable.py's
plate constants), iterations before -> after this and :data:`SINGLE_LEVEL_RATIO`: 128² of
4 km 121 -> 7, 160² of 2 km 216 -> 6 (levels 1.38882e23 and 1.38889e23 N m before),
256² of 2 km 256 -> 6; in the infill of tests/benchmarks/basin_large.py ``--layout weak``
(300², ten stages) 16-25 infill iterations per stage -> 7-8, as with constant te. A least
ramp of 1.5, 2, 3 or 10 all fixed the valley; 10 (with one level up to a two-fold range)
slowed gentle margins whose whole range is a few-fold (tanh te 20 -> 25 / 26 / 30 km at
256² of 4 km: 7 / 7 / 8 -> 10 / 10 / 12 iterations; the top level's weight never reached
1), 3 a little (8 / 8 / 8), 2 and 1.5 not at all. With 2 (and one level only below
1.1-fold), unchanged or fewer iterations on the cases of tests/benchmarks/variable.py and
te_map_robustness.py at 256² and 512² (holes 6 -> 5, a smooth random te map of 5-60 km
25 -> 23, two opposite tanh margins 28 -> 6, the margin crossed by hinges 18 -> 16; te_map
15 -> 7 at 512² of 4 km with the periodic band of
:func:`gridflex.solvers.rigidity_features.sharp_band`)."""

SINGLE_LEVEL_RATIO = 1.1
"""Largest rigidity ratio outside the band that the blend serves with one level (the
largest rigidity): at most 10 % off, one FFT pair per iteration less than two levels."""

SINGLE_PRECISION_FFT = True
"""Run the blend's FFTs in single precision (about 1.5 times as fast as double, half the
memory traffic). The conjugate gradients use the flexible (Polak-Ribière) update, which
tolerates the slightly inexact preconditioner; if the iteration ever needs a restart (true
residual above the tolerance when the recurrence says it converged), the blend switches to
double precision (:meth:`MultiplicativePreconditioner.use_double_precision`). Measured on
the six cases of tests/benchmarks/variable.py at 1024² of 2 km: the same iteration counts
and final residuals in single precision throughout as with a switch to double below a
relative residual of 1e-4 (an earlier rule). On 1 km cells both stall at the same level,
which is the round-off floor of the operator, not the FFT precision."""

WEIGHT_SMOOTHING = 1.5
"""Smoothing of log D before the blend weights are taken (standard deviation of the
near-Gaussian kernel of :func:`smooth_like_gaussian`), in flexural parameters of the
smallest level (measured with a Gaussian: 33 -> 30 iterations on the margin above)."""


def discrete_symbol(shape: tuple[int, int], dy: float, dx: float) -> np.ndarray:
    """s = 4 sin²(ky dy / 2) / dy² + 4 sin²(kx dx / 2) / dx² on the rfft2 half-spectrum (m⁻²).

    The Fourier symbol of −(δxx + δyy); its square is the symbol of the constant-rigidity
    13-point biharmonic stencil.
    """
    ny, nx = shape
    sy = (4.0 / dy**2) * np.sin(np.pi * scipy.fft.fftfreq(ny)) ** 2
    sx = (4.0 / dx**2) * np.sin(np.pi * scipy.fft.rfftfreq(nx)) ** 2
    return sy[:, None] + sx[None, :]


SPECTRAL_TERM_SMOOTHING = 0.5
"""The smoothing of :data:`WEIGHT_SMOOTHING` for an operator with a spectral term (the blend
in difference form, see :class:`BlendPreconditioner`), in flexural parameters of the smallest
level: there the weights only shape the short-range corrections, and sharper ones do
better. Measured on the te-grid half-space step of tests/benchmarks/history.py (margin
10 -> 60 km, 128² cells of 10 km, 100 yr steps, 15 steps; 2 levels): smoothing 3 / 1.5 /
0.75 / 0.4 / 0.2 / 0 took 12.1 / 8.4 / 5.9 / 5.8 / 5.9 / 6.1 iterations per solve."""


def _box_widths(sigma: float) -> list[int]:
    """Odd widths (cells) of three box-filter passes whose variances add up closest to
    *sigma*² (one pass of width w has variance (w² − 1) / 12): the odd widths just below
    and above sqrt(4 sigma² + 1), mixed."""
    width = math.sqrt(4.0 * sigma**2 + 1.0)
    low = max(1, 2 * int((width - 1.0) // 2) + 1)
    high = low + 2
    target = 12.0 * sigma**2
    mix = min(range(4), key=lambda k: abs(k * (high**2 - 1) + (3 - k) * (low**2 - 1) - target))
    return [high] * mix + [low] * (3 - mix)


def smooth_like_gaussian(
    values: np.ndarray, sigma: tuple[float, float], modes: tuple[str, str]
) -> np.ndarray:
    """Smooth a grid with three passes of a box filter per axis (close to a Gaussian of
    standard deviation *sigma*, in cells, per axis, its variance matched to within a few
    per cent by the choice of odd widths; cost independent of *sigma*).

    Parameters
    ----------
    values : numpy.ndarray, shape (ny, nx)
        The grid (float32 or float64); used as work space (overwritten).
    sigma : tuple of float
        Standard deviation along y and x (cells).
    modes : tuple of str
        :mod:`scipy.ndimage` boundary mode along y and x ("wrap" or "nearest").

    Returns
    -------
    numpy.ndarray
        The smoothed grid: *values* or a second array of its shape and type.
    """
    spare = np.empty_like(values)
    for axis in (0, 1):
        for width in _box_widths(sigma[axis]):
            if width > 1:
                scipy.ndimage.uniform_filter1d(values, width, axis, output=spare, mode=modes[axis])
                values, spare = spare, values
    return values


def _level_weights(
    operator: PlateOperator,
    levels: np.ndarray,
    plate: np.ndarray,
    band: np.ndarray | None,
    scaled: bool = True,
) -> list[np.ndarray]:
    """Blend weights C_l (float32) of two or more rigidity levels.

    A cos/sin partition of unity in smoothed log D (smoothing :data:`WEIGHT_SMOOTHING`
    flexural parameters of the smallest level), each weight times the diagonal scaling
    (D_l / D)^(p/2) (:data:`RIGIDITY_SCALING`); zero where D = 0 and on the band.
    Without *scaled* (an operator with a spectral term) the smoothing is
    :data:`SPECTRAL_TERM_SMOOTHING` and p = 0: where that term dominates
    the symbol the levels differ little and the unscaled partition of unity is right;
    measured on the te-grid half-space step of tests/benchmarks/history.py (margin
    10 -> 60 km, 128² cells of 10 km, 100 yr steps): 18.3 -> 13.7 iterations per solve,
    uniform te grid unchanged (1.55).
    """
    rigidity = operator.rigidity
    count = levels.size
    log_low, log_high = math.log(levels[0]), math.log(levels[-1])
    # the ramp between neighbouring levels spans at least MIN_RAMP_RATIO (see there)
    span = max(log_high - log_low, (count - 1) * math.log(MIN_RAMP_RATIO))
    logd = np.full(operator.shape, log_low, dtype=np.float32)
    np.log(rigidity, out=logd, where=plate, casting="same_kind")
    # weights follow log D smoothed over a fraction of the smallest flexural parameter: a
    # smoother partition of unity commutes better with the solves
    alpha = (4.0 * levels[0] / operator.stiffness) ** 0.25
    smoothing = WEIGHT_SMOOTHING if scaled else SPECTRAL_TERM_SMOOTHING
    if smoothing > 0:
        modes = tuple("wrap" if e == "periodic" else "nearest" for e in operator.edges)
        sigma = (smoothing * alpha / operator.dy, smoothing * alpha / operator.dx)
        logd = smooth_like_gaussian(logd, sigma, modes)  # type: ignore[arg-type]
    scaling = rigidity_scaling(float(levels[1] / levels[0])) if scaled else 0.0
    weights = [np.zeros(operator.shape, dtype=np.float32) for _ in range(count)]
    ny, nx = operator.shape

    def work(j0: int, j1: int, _thread: int) -> None:
        block = logd[j0:j1]
        u = (block - log_low) * ((count - 1) / span)
        np.clip(u, 0.0, count - 1, out=u)
        base = np.minimum(np.floor(u), count - 2)
        angle = (u - base) * (0.5 * np.pi)
        cos, sin = np.cos(angle), np.sin(angle)
        on_plate = plate[j0:j1]
        for level in range(count):
            c = np.where(base == level, cos, 0.0)
            c += np.where(base == level - 1, sin, 0.0)
            # diagonal scaling towards 1 / D at short wavelengths (RIGIDITY_SCALING)
            c *= np.exp(0.5 * scaling * (math.log(levels[level]) - block))
            np.multiply(c, on_plate, out=weights[level][j0:j1], casting="same_kind")

    for_row_blocks(ny, block_rows(nx, ny), work)
    if band is not None and band.size:
        for c in weights:
            c.reshape(-1)[band] = 0.0
    return weights


@dataclass(eq=False)
class BlendPreconditioner:
    """Σ_l C_l P_l C_l: spectral solves at rigidity levels, blended in log D.

    With a constant-coefficient spectral term S added to the operator (the implicit step
    of a plate over a viscous half-space, S = 2 eta |k| / (gamma h)) and two or more
    levels, the blend is taken in difference form instead::

        M⁻¹ = C_top P_top C_top + Σ_{l < top} C_l (P_l − P_top) C_l,

    C_top the plate mask (1 on the plate, so no weight at all on an unbroken plate) and
    P_top the solve at the largest level. S dominates the long wavelengths, where all
    P_l tend to 1 / S, a kernel that decays only like 1 / r: the plain blend cuts it
    at the changes of rigidity (Σ_l C_l(x) C_l(y) ≈ 0 for x and y on different
    levels), while P_l − P_top >= 0 vanishes there and is a short-range correction
    towards the weaker levels, so the long wavelengths get the undivided P_top. The
    cost per iteration is the same (one FFT pair per level). Measured on the te-grid
    half-space step of tests/benchmarks/history.py (margin 10 -> 60 km, 128² cells of
    10 km, 100 yr steps, 15 steps): 16.2 -> 8.5 iterations per solve with 2 levels; in
    difference form 3, 4 and 6 levels took 11.0, 10.4 and 9.6, and the scaled weights
    of :data:`RIGIDITY_SCALING` 9.7 (2 levels).

    Attributes
    ----------
    levels : numpy.ndarray
        Rigidity of each level (N m).
    fft_shape : tuple of int
        FFT grid; equal to the node grid along periodic axes, zero-padded to a fast length
        along the others.
    """

    levels: np.ndarray
    fft_shape: tuple[int, int]
    _shape: tuple[int, int]
    _weights: list[np.ndarray | None]
    _local: np.ndarray | None
    _spacing: tuple[float, float]
    _stiffness: float
    single: bool = SINGLE_PRECISION_FFT
    _extra: np.ndarray | None = None
    _transfers: dict[np.dtype, list[np.ndarray]] = field(default_factory=dict, repr=False)
    _filters: dict[np.dtype, list[BlockedSpectralFilter]] = field(default_factory=dict, repr=False)
    _tmp: list[np.ndarray] = field(default_factory=list, repr=False)
    _difference: bool = False

    @classmethod
    def build(
        cls,
        operator: PlateOperator,
        band: np.ndarray | None = None,
        extra_symbol: np.ndarray | None = None,
    ) -> BlendPreconditioner:
        """Levels and weights for *operator*'s rigidity grid.

        Nodes of zero rigidity take no part in the blend: their term is the exact local
        (Airy) inverse 1 / (a Δρ g) of a column with no plate.

        Parameters
        ----------
        operator : PlateOperator
            The operator.
        band : numpy.ndarray of int, optional
            Flat indices of the nodes solved exactly in the multiplicative combination.
            The residual the blend receives there is zero and its output there is
            replaced by the second band solve, so the weights are set to zero on the band
            and a level used only inside it is dropped (one FFT pair less per iteration).
        extra_symbol : numpy.ndarray, optional
            Symbol (Pa m⁻¹) of a constant-coefficient term added to the operator, on the
            rfft2 half-spectrum of the (doubly periodic) node grid; it is added to every
            level's denominator.
        """
        rigidity = operator.rigidity
        shape = operator.shape
        fft_y, fft_x = (
            n if edge == "periodic" else int(scipy.fft.next_fast_len(n, real=True))
            for n, edge in zip(shape, operator.edges, strict=True)
        )
        fft_shape = (fft_y, fft_x)
        spacing, stiffness = (operator.dy, operator.dx), operator.stiffness
        plate = rigidity > 0
        all_plate = bool(plate.all())
        extra = None
        if extra_symbol is not None:
            if operator.edges != ("periodic", "periodic"):
                raise ValueError("an extra spectral symbol needs a doubly periodic operator")
            extra = np.asarray(extra_symbol, dtype=np.float64)
        local = None
        if not all_plate:
            local = np.where(plate, 0.0, 1.0 / (operator.area * operator.stiffness))
            if band is not None:
                local.reshape(-1)[band] = 0.0
        # the levels span the rigidity where the blend acts: outside the band (inside it
        # the weights are zero); measured on the weak zone of tests/benchmarks/variable.py,
        # whose band holds all the weak plate: 2 levels -> 1, one FFT pair less per iteration
        acting = plate if band is None or band.size == 0 else plate.copy()
        if band is not None and band.size:
            acting.reshape(-1)[band] = False
        if not acting.any():
            acting = plate
        if not acting.any() and extra is not None:
            # no plate anywhere: the operator is a Δρ g + S, and its spectral inverse at
            # zero rigidity is exact where a = 1
            return cls(
                np.zeros(1), fft_shape, shape, [None], None, spacing, stiffness, False, extra
            )
        if not acting.any():
            return cls(np.zeros(0), fft_shape, shape, [], local, spacing, stiffness, False, extra)
        lo = math.log(float(np.min(rigidity, where=acting, initial=np.inf)))
        hi = math.log(float(np.max(rigidity, where=acting, initial=0.0)))
        single_level = hi - lo <= math.log(SINGLE_LEVEL_RATIO)
        count = 1 if single_level else 1 + math.ceil((hi - lo) / math.log(LEVEL_SPACING) - 1e-6)
        if count > LEVELS_COUNTED:
            # the solve's memory check counted LEVELS_COUNTED levels (two float64 grids
            # each: weights and spectra, and the double-precision transfers of a restart)
            check_memory(
                16.0 * (count - LEVELS_COUNTED) * fft_shape[0] * fft_shape[1],
                f"{count} blend levels of the finite-difference preconditioner (rigidity "
                f"from {math.exp(lo):.3g} to {math.exp(hi):.3g} N m) on "
                f"{fft_shape[0]} x {fft_shape[1]} nodes",
                advice="use fewer or coarser cells, or a te map with a smaller range",
            )
        if count > 1:
            levels = np.exp(np.linspace(lo, hi, count))
        else:
            levels = np.array([float(np.max(rigidity, where=acting, initial=0.0))])
        if levels.size == 1:
            if all_plate and (band is None or band.size == 0):
                weights: list[np.ndarray | None] = [None]
            else:
                single = plate.astype(np.float32)
                if band is not None:
                    single.reshape(-1)[band] = 0.0
                weights = [single]
        else:
            weights = list(_level_weights(operator, levels, plate, band, extra is None))
        # with a spectral term: the top level unweighted, the others its local corrections
        difference = extra is not None and levels.size > 1
        if difference:  # (see the class docstring)
            weights[-1] = None if all_plate else plate.astype(np.float32)
        used = [i for i, c in enumerate(weights) if c is None or c.any()]
        return cls(
            levels[used],
            fft_shape,
            shape,
            [weights[i] for i in used],
            local,
            spacing,
            stiffness,
            SINGLE_PRECISION_FFT,
            extra,
            _difference=difference,
        )

    def _dtype(self) -> np.dtype:
        return np.dtype(np.float32 if self.single else np.float64)

    def _transfers_now(self) -> list[np.ndarray]:
        """The transfer functions 1 / (D_l s² + Δρ g) of the levels, in the current
        precision (made on first use: double precision only if the iteration restarts)."""
        dtype = self._dtype()
        transfers = self._transfers.get(dtype)
        if transfers is None:
            symbol = discrete_symbol(self.fft_shape, *self._spacing)
            symbol *= symbol
            transfers = self._transfers[dtype] = []
            if self._difference:
                top = self._level_transfer(symbol, float(self.levels[-1]))
                for level in self.levels[:-1]:
                    difference = self._level_transfer(symbol, float(level))
                    difference -= top
                    transfers.append(difference.astype(dtype))
                transfers.append(top.astype(dtype))
                return transfers
            for level in self.levels:
                transfer = np.multiply(symbol, level, dtype=dtype)
                transfer += dtype.type(self._stiffness)
                if self._extra is not None:
                    transfer += self._extra.astype(dtype, copy=False)
                transfers.append(np.reciprocal(transfer, out=transfer))
        return transfers

    def _level_transfer(self, symbol: np.ndarray, level: float) -> np.ndarray:
        """1 / (D s² + Δρ g + extra) in double precision (s² given as *symbol*)."""
        transfer = symbol * level
        transfer += self._stiffness
        if self._extra is not None:
            transfer += self._extra
        return np.reciprocal(transfer, out=transfer)

    def _filters_now(self) -> list[BlockedSpectralFilter]:
        """One spectral filter per level, in the current precision, and the per-thread
        work rows of their blocks (made on first use)."""
        dtype = self._dtype()
        filters = self._filters.get(dtype)
        if filters is None:
            filters = self._filters[dtype] = [
                BlockedSpectralFilter(self._shape, self.fft_shape, dtype) for _ in self.levels
            ]
            if not self._tmp:
                rows, nx = filters[0].rows, self._shape[1]
                self._tmp = [np.empty((rows, nx)) for _ in range(thread_count())]
        return filters

    def apply(self, residual: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """Approximate K⁻¹ r (m) for a residual *r* (Pa) of shape (ny, nx).

        One pass over the rows writes C_l r for every level into cache-sized blocks and
        transforms them along x; the columns of each level are transformed, divided by its
        symbol and transformed back; one more pass transforms the rows back and sums
        C_l (P_l C_l r) (plus the local term of broken nodes)
        (:class:`~gridflex.solvers.fft_buffers.BlockedSpectralFilter`).

        Parameters
        ----------
        residual : numpy.ndarray, shape (ny, nx)
            r (Pa), float64.
        out : numpy.ndarray, shape (ny, nx), optional
            Where to write the result (float64, not *residual*); a new array by default.
        """
        ny, _ = self._shape
        out = np.empty(self._shape) if out is None else out.reshape(self._shape)
        r = residual.reshape(self._shape)
        local = self._local
        if not self._weights:
            if local is None:
                out[...] = 0.0
            else:
                np.multiply(local, r, out=out)
            return out
        filters = self._filters_now()
        transfers = self._transfers_now()
        pairs = list(zip(self._weights, filters, strict=True))

        def forward(j0: int, j1: int, thread: int) -> None:
            rb = r[j0:j1]
            for weight, spectral in pairs:
                block = spectral.row_buffer(thread, j1 - j0)
                if weight is None:
                    block[...] = rb
                else:
                    np.multiply(weight[j0:j1], rb, out=block, casting="same_kind")
                spectral.forward_rows(j0, j1, thread)

        def inverse(j0: int, j1: int, thread: int) -> None:
            target = out[j0:j1]
            tmp = self._tmp[thread][: j1 - j0]
            for level, (weight, spectral) in enumerate(pairs):
                solved = spectral.inverse_rows(j0, j1, thread)
                destination = target if level == 0 else tmp
                if weight is None:
                    destination[...] = solved
                else:
                    np.multiply(weight[j0:j1], solved, out=destination)
                if level:
                    target += tmp
            if local is not None:
                np.multiply(local[j0:j1], r[j0:j1], out=tmp)
                target += tmp

        rows = filters[0].rows
        for_row_blocks(ny, rows, forward)
        for spectral, transfer in zip(filters, transfers, strict=True):
            spectral.filter_columns(transfer)
        for_row_blocks(ny, rows, inverse)
        return out


def symmetric_factor(matrix: object) -> spla.SuperLU:
    """Sparse LU factor (SuperLU) of a symmetric positive-definite *matrix* (any scipy
    sparse format): a symmetric fill-reducing ordering with diagonal pivots (measured on
    the step of tests/benchmarks/variable.py at 1024², band of K: 22 M factor entries and
    1.0-1.9 s, against 36 M and 1.8-2.9 s with COLAMD)."""
    return spla.splu(
        scipy.sparse.csc_matrix(matrix),
        permc_spec="MMD_AT_PLUS_A",
        diag_pivot_thresh=0.0,
        options={"SymmetricMode": True},
    )


BAND_RESIDUAL_NEGLIGIBLE = 1e-3
"""Relative size ||r_B|| / ||r|| of the residual on the band below which the first band
solve of :class:`MultiplicativePreconditioner` is skipped."""


@dataclass(eq=False)
class BandSolver:
    """Exact solve of K restricted to a set of nodes B (sparse LU), zero elsewhere.

    Also keeps K on the band's neighbourhood C (B widened by the stencil radius, 2 nodes),
    so that K v for v supported on B, and (K z) on B for any z, cost a sparse product on the
    band instead of a full operator application.
    """

    nodes: np.ndarray
    _solve: Callable[[np.ndarray], np.ndarray] | None
    _around: np.ndarray
    _k_columns: object  # K[C, B], csr
    _k_rows: object  # K[B, C], csr

    @classmethod
    def build(cls, operator: PlateOperator, nodes: np.ndarray) -> BandSolver:
        """Assemble K on the band's neighbourhood and factorise K on the band."""
        empty = np.zeros(0, dtype=np.int64)
        if nodes.size == 0:
            return cls(nodes, None, empty, None, None)
        band = np.zeros(operator.shape, dtype=np.uint8)
        band.reshape(-1)[nodes] = 1
        around = np.flatnonzero(
            scipy.ndimage.maximum_filter(band, size=5, mode=_beyond_edges(operator))
        )
        position = np.searchsorted(around, nodes)
        k_rows = operator.rows(nodes, around)  # K[B, C]: the band's rows are inside C
        k_columns = k_rows.T.tocsr()  # K is symmetric: K[C, B] = K[B, C]^T
        factor = symmetric_factor(k_rows[:, position])
        log.info("band LU of %d nodes", nodes.size)  # (factor.L builds a copy: not asked)
        return cls(nodes, factor.solve, around, k_columns, k_rows)

    @property
    def size(self) -> int:
        """Number of band nodes."""
        return int(self.nodes.size)

    def solve_band(self, residual_band: np.ndarray) -> np.ndarray:
        """K_BB⁻¹ r_B (values on the band nodes)."""
        assert self._solve is not None
        return self._solve(residual_band)

    def subtract_product(self, residual: np.ndarray, values_band: np.ndarray) -> np.ndarray:
        """r − K v for v given on the band (zero elsewhere); a new array."""
        out = residual.copy()
        out.reshape(-1)[self._around] -= self._k_columns @ values_band
        return out

    def residual_band(self, residual: np.ndarray, z: np.ndarray) -> np.ndarray:
        """(r − K z) on the band nodes."""
        return residual.ravel()[self.nodes] - self._k_rows @ z.ravel()[self._around]


class PlatePreconditioner(Protocol):
    """What the finite-difference solve needs of its preconditioner
    (:class:`MultiplicativePreconditioner`, or
    :class:`~gridflex.solvers.multigrid.AggregationPreconditioner` over the band's caps)."""

    @property
    def band_size(self) -> int:
        """Band nodes solved exactly."""
        ...

    @property
    def blend_levels(self) -> np.ndarray:
        """Rigidity levels of the blend (N m)."""
        ...

    @property
    def description(self) -> str:
        """Name recorded in the solve's information."""
        ...

    @property
    def tolerance_factor(self) -> float:
        """Share of the requested tolerance at which the iteration stops (<= 1: the
        energy-norm estimate is looser than the pointwise error for some)."""
        ...

    @property
    def exact(self) -> bool:
        """M = K up to rounding (then r·M⁻¹r is the squared energy-norm error itself)."""
        ...

    def use_double_precision(self) -> None:
        """Run in double precision from now on."""
        ...

    def strengthen(self, further: float = math.inf, left: float = math.inf) -> bool:
        """Called every few dozen iterations with the *further* iterations the solve heads
        for and the iterations *left* before its limit: make M⁻¹ a better approximation
        of K⁻¹ if the preconditioner can and judges it worth its cost (the iteration then
        restarts with it); True when it changed. By default (inf, inf): as strong as it
        can be made."""
        ...

    def apply(
        self, residual: np.ndarray, out: np.ndarray | None = None, norm: float | None = None
    ) -> np.ndarray:
        """M⁻¹ r (m) for a residual r (Pa), symmetric positive definite."""
        ...

    def initial_guess(
        self,
        rhs: np.ndarray,
        start: np.ndarray | None = None,
        apply: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
        product: np.ndarray | None = None,
    ) -> tuple[np.ndarray, np.ndarray]:
        """A start x₀ and its residual b − K x₀."""
        ...


@dataclass(eq=False)
class MultiplicativePreconditioner:
    """Symmetric multiplicative combination: band, blend on the remaining residual, band.

    z₁ = B r;  z₂ = z₁ + M (r − K z₁);  z = z₂ + B (r − K z₂),
    with B the band solve and M the blend. Symmetric by construction; without a band it is
    the blend alone. The two products with K are taken on the band only.

    Attributes
    ----------
    operator : PlateOperator
        K.
    blend : BlendPreconditioner
        M, on the residual the band leaves.
    band : BandSolver
        B.
    exact : bool
        The combination is K⁻¹ up to rounding (:func:`band_is_exact`): r·M⁻¹r is then the
        squared energy-norm error itself.
    """

    operator: PlateOperator
    blend: BlendPreconditioner
    band: BandSolver
    exact: bool = False

    def use_double_precision(self) -> None:
        """Run the blend's FFTs in double precision from now on."""
        if self.blend.single:
            self.blend.single = False
            log.debug("blend FFTs now in double precision")

    def apply(
        self, residual: np.ndarray, out: np.ndarray | None = None, norm: float | None = None
    ) -> np.ndarray:
        """Preconditioned residual z (m) for a residual r (Pa).

        When r is (to :data:`BAND_RESIDUAL_NEGLIGIBLE`) zero on the band, z₁ = B r vanishes
        and the first band solve is skipped. Conjugate gradients started from
        :meth:`initial_guess` keep their residuals zero on the band, since (K z)_B = r_B for
        every z returned here, so each iteration costs one band solve: the deflation
        preconditioner "A-DEF2" with its special starting vector, equivalent in exact
        arithmetic to the symmetric form (Tang, Nabben, Vuik & Erlangga 2009, J. Sci.
        Comput. 39, "Comparison of two-level preconditioners derived from deflation,
        domain decomposition and multigrid methods"; recalled from memory).

        Parameters
        ----------
        residual : numpy.ndarray, shape (ny, nx)
            r (Pa).
        out : numpy.ndarray, shape (ny, nx), optional
            Where to write z (float64, not *residual*); a new array by default.
        norm : float, optional
            ||r||₂ if known (to test whether the residual on the band is negligible).
        """
        if norm is None:
            norm = math.sqrt(dot(residual, residual))
        band = self.band
        if band.size == 0:
            return self.blend.apply(residual, out)
        on_band = residual.ravel()[band.nodes]
        if math.sqrt(dot(on_band, on_band)) <= BAND_RESIDUAL_NEGLIGIBLE * norm:
            z = self.blend.apply(residual, out)  # the blend's weights are zero on the band
        else:
            first = band.solve_band(on_band)
            z = self.blend.apply(band.subtract_product(residual, first), out)
            z.reshape(-1)[band.nodes] += first
        z.reshape(-1)[band.nodes] += band.solve_band(band.residual_band(residual, z))
        return z

    @property
    def band_size(self) -> int:
        """Band nodes solved exactly."""
        return self.band.size

    @property
    def blend_levels(self) -> np.ndarray:
        """The blend's rigidity levels (N m), a copy."""
        return self.blend.levels.copy()

    @property
    def description(self) -> str:
        """Name of the preconditioner, as recorded in the solve's information."""
        return "band and blend" if self.band.size else "blend"

    @property
    def tolerance_factor(self) -> float:
        """1: the energy-norm estimate stands (largest difference from a direct solve at
        most 0.6 of it, tests/benchmarks/te_map_robustness.py)."""
        return 1.0

    def strengthen(self, further: float = math.inf, left: float = math.inf) -> bool:
        """Nothing to strengthen (the band and the levels are fixed by the rigidity):
        False."""
        return False

    def initial_guess(
        self,
        rhs: np.ndarray,
        start: np.ndarray | None = None,
        apply: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
        product: np.ndarray | None = None,
    ) -> tuple[np.ndarray, np.ndarray]:
        """A start x₀ and its residual b − K x₀, which is zero on the band (set exactly).

        Without *start*, x₀ = B b (exact on the band, zero elsewhere). With *start*, x₀ is
        :func:`scaled_start` (*apply* the full operator, :meth:`PlateOperator.apply` by
        default), then corrected on the band by B (b − K x₀).
        """
        band = self.band
        x, residual = scaled_start(
            rhs, start, self.operator.apply if apply is None else apply, product
        )
        if band.size == 0:
            return x, residual
        on_band = band.solve_band(residual.ravel()[band.nodes])
        x.reshape(-1)[band.nodes] += on_band
        residual = band.subtract_product(residual, on_band)
        residual.reshape(-1)[band.nodes] = 0.0
        return x, residual


def _beyond_edges(operator: PlateOperator) -> list[str]:
    """Filter modes of scipy.ndimage for a neighbourhood on *operator*'s grid: wrapped
    round a periodic axis, nothing (zero) beyond the other edges."""
    return ["wrap" if e == "periodic" else "constant" for e in operator.edges]


def band_is_exact(operator: PlateOperator, band: np.ndarray) -> bool:
    """Whether the band and blend of *band* are K⁻¹ itself (up to rounding).

    True when every node outside the band has no plate next to it (all rigidities of
    its 3 x 3 neighbourhood zero, wrapping round periodic axes): its row and column of
    K then hold the restoring term a Δρ g alone, the blend's term there is its exact
    local inverse 1 / (a Δρ g), and the band solve is K's own factor on the rest, so
    :class:`MultiplicativePreconditioner` returns K⁻¹ r (the 13-point stencil couples two
    nodes through the curvatures and twists at the nodes and corners next to both, so a
    node with no plate next to it is coupled to none; checked against K's rows for every
    kind of edge in tests/solvers/test_preconditioners.py). Rough te maps tapered to te = 0
    round a fine grid have such bands (their sharp changes spread the band over the
    plate; the rest is open sea): a start or iterate is then certified on its own
    residual, without :data:`gridflex.solvers.conjugate_gradient.START_MARGIN`.

    Parameters
    ----------
    operator : PlateOperator
        K.
    band : numpy.ndarray of int
        Flat indices of the band nodes.

    Returns
    -------
    bool
    """
    outside = np.ones(operator.rigidity.size, dtype=bool)
    outside[band] = False
    if not outside.any():
        return True
    if np.any(operator.rigidity.reshape(-1)[outside] != 0.0):
        return False
    near = scipy.ndimage.maximum_filter(operator.rigidity, size=3, mode=_beyond_edges(operator))
    near = near > 0.0
    return not bool(np.any(near.reshape(-1)[outside]))


def scaled_start(
    rhs: np.ndarray,
    start: np.ndarray | None,
    apply: Callable[[np.ndarray, np.ndarray], np.ndarray],
    product: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """A start x₀ for K x = b and its residual b − K x₀.

    Zero without *start*. With *start* s (a previous deflection, say), x₀ = ξ s with the ξ
    that minimises the energy norm of the error along it, ξ = s·b / s·K s (zero when that
    is not positive, so a start is never worse than none, even for a load that has all but
    vanished; the "Hegedüs trick", Liesen & Strakoš 2013, "Krylov Subspace Methods", from
    memory).

    Parameters
    ----------
    rhs : numpy.ndarray
        b (area-weighted load, Pa).
    start : numpy.ndarray, optional
        s (m).
    apply : callable
        ``apply(x, out)`` writes K x into *out* (the full operator).
    product : numpy.ndarray, optional
        K s when the caller knows it (not modified); saves the product.

    Returns
    -------
    x0, residual : numpy.ndarray
        New arrays of the shape of *rhs*.
    """
    x = np.zeros(rhs.shape)
    if start is None:
        return x, rhs.copy()
    s = np.asarray(start, dtype=np.float64).reshape(rhs.shape)
    if product is None:
        product = apply(s, np.empty(rhs.shape))
    else:
        product = np.array(product, dtype=np.float64).reshape(rhs.shape)
    energy = dot(s, product)
    xi = dot(s, rhs) / energy if energy > 0 else 0.0
    if not xi > 0:
        return x, rhs.copy()
    np.multiply(s, xi, out=x)
    product *= xi
    return x, np.subtract(rhs, product, out=product)
