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

import numpy as np
import scipy.fft
import scipy.ndimage
import scipy.sparse.linalg as spla

from .plate_operator import PlateOperator

__all__ = [
    "BandSolver",
    "BlendPreconditioner",
    "MultiplicativePreconditioner",
    "SHARP_RATIO",
    "discrete_symbol",
    "rigidity_scaling",
    "sharp_band",
    "sharp_nodes",
    "steep_nodes",
]

log = logging.getLogger(__name__)

SHARP_RATIO = 10.0
"""A node is sharp when rigidity differs more than this factor within its 3 x 3 neighbourhood,
or within :data:`STEEP_WINDOW` flexural parameters along x or y."""

STEEP_WINDOW = 1.0
"""Half-width of the window for steep (not sharp) rigidity changes, in flexural parameters
of the smallest non-zero rigidity."""

LEVEL_SPACING = 1000.0
"""Largest rigidity ratio between neighbouring blend levels: 2 levels for a 1000-fold range
(a factor-10 Te contrast), 3 for up to a million-fold. Measured on the benchmark's smooth
margin (tests/benchmarks/variable.py, Te 6 -> 60 km, tanh of half-width 80 km, 256² cells of
4 km), iterations to a true relative residual of 1e-8: without :data:`RIGIDITY_SCALING`
2 levels 84, 3 levels (ratio 31.6) 34, 4 levels 51; with the scaling 2 levels 24, 3 levels 28.
Two levels also mean one FFT pair less per iteration."""

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


SINGLE_PRECISION_FFT = True
"""Start with the blend's FFTs in single precision (about 1.5 times as fast). The conjugate
gradients use the flexible (Polak-Ribière) update, which tolerates the slightly inexact
preconditioner, and the blend switches to double precision once the relative residual is
below :data:`SINGLE_PRECISION_UNTIL` (single precision alone stalls near 1e-8 on fine grids:
seen on a 1024² grid of 1 km cells)."""

SINGLE_PRECISION_UNTIL = 1e-4
"""Relative residual below which the blend's FFTs run in double precision."""

WEIGHT_SMOOTHING = 1.5
"""Gaussian smoothing of log D before the blend weights are taken, in flexural parameters
of the smallest level (measured: 33 -> 30 iterations on the margin above)."""


def discrete_symbol(shape: tuple[int, int], dy: float, dx: float) -> np.ndarray:
    """s = 4 sin²(ky dy / 2) / dy² + 4 sin²(kx dx / 2) / dx² on the rfft2 half-spectrum (m⁻²).

    The Fourier symbol of −(δxx + δyy); its square is the symbol of the constant-rigidity
    13-point biharmonic stencil.
    """
    ny, nx = shape
    sy = (4.0 / dy**2) * np.sin(np.pi * scipy.fft.fftfreq(ny)) ** 2
    sx = (4.0 / dx**2) * np.sin(np.pi * scipy.fft.rfftfreq(nx)) ** 2
    return sy[:, None] + sx[None, :]


@dataclass(eq=False)
class BlendPreconditioner:
    """Σ_l C_l P_l C_l: spectral solves at rigidity levels, blended in log D.

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
    _transfer: list[np.ndarray]
    _local: np.ndarray | None
    _transfer_single: list[np.ndarray]
    single: bool = SINGLE_PRECISION_FFT
    _buffers: dict[np.dtype, np.ndarray] = field(default_factory=dict, repr=False)

    @classmethod
    def build(
        cls, operator: PlateOperator, band: np.ndarray | None = None
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
        """
        rigidity = operator.rigidity
        shape = operator.shape
        fft_shape = tuple(
            n if edge == "periodic" else scipy.fft.next_fast_len(n, real=True)
            for n, edge in zip(shape, operator.edges, strict=True)
        )
        plate = rigidity > 0
        local = None
        if not plate.all():
            local = np.where(plate, 0.0, 1.0 / (operator.area * operator.stiffness))
            if band is not None:
                local.flat[band] = 0.0
        # the levels span the rigidity where the blend acts: outside the band (inside it
        # the weights are zero); measured on the weak zone of tests/benchmarks/variable.py,
        # whose band holds all the weak plate: 2 levels -> 1, one FFT pair less per iteration
        acting = plate.copy()
        if band is not None:
            acting.flat[band] = False
        positive = rigidity[acting] if acting.any() else rigidity[plate]
        if positive.size == 0:
            return cls(np.zeros(0), fft_shape, shape, [], [], local, [], False)
        lo, hi = math.log(positive.min()), math.log(positive.max())
        count = 1 + math.ceil((hi - lo) / math.log(LEVEL_SPACING) - 1e-6) if hi > lo else 1
        levels = np.exp(np.linspace(lo, hi, count)) if count > 1 else np.array([positive.max()])
        weights: list[np.ndarray | None] = []
        if levels.size == 1:
            single = plate.astype(np.float64)
            if band is not None:
                single.flat[band] = 0.0
            weights = [None if plate.all() and (band is None or band.size == 0) else single]
        else:
            logd = np.log(np.where(plate, rigidity, levels[0]))
            # weights follow log D smoothed over a fraction of the smallest flexural
            # parameter: a smoother partition of unity commutes better with the solves
            alpha = (4.0 * levels[0] / operator.stiffness) ** 0.25
            sigma = (WEIGHT_SMOOTHING * alpha / operator.dy, WEIGHT_SMOOTHING * alpha / operator.dx)
            modes = ["wrap" if e == "periodic" else "nearest" for e in operator.edges]
            if WEIGHT_SMOOTHING > 0:
                logd = scipy.ndimage.gaussian_filter(logd, sigma, mode=modes, truncate=3.0)
            u = (logd - math.log(levels[0])) / (math.log(levels[-1]) - math.log(levels[0]))
            u = np.clip(u * (levels.size - 1), 0.0, levels.size - 1)
            base = np.minimum(np.floor(u), levels.size - 2)
            frac = u - base
            scaling = rigidity_scaling(float(levels[1] / levels[0]))
            for level in range(levels.size):
                c = np.where(base == level, np.cos(0.5 * np.pi * frac), 0.0)
                c += np.where(base == level - 1, np.sin(0.5 * np.pi * frac), 0.0)
                # diagonal scaling towards 1 / D at short wavelengths (RIGIDITY_SCALING)
                c *= np.exp(0.5 * scaling * (math.log(levels[level]) - logd))
                c[~plate] = 0.0
                if band is not None:
                    c.flat[band] = 0.0
                weights.append(c)
        symbol = discrete_symbol(fft_shape, operator.dy, operator.dx)
        symbol *= symbol
        transfer = [1.0 / (level * symbol + operator.stiffness) for level in levels]
        used = [i for i, c in enumerate(weights) if c is None or np.any(c)]
        kept = [transfer[i] for i in used]
        return cls(
            levels[used], fft_shape, shape, [weights[i] for i in used], kept, local,
            [t.astype(np.float32) for t in kept], SINGLE_PRECISION_FFT,
        )

    def _spectral(
        self, residual: np.ndarray, weight: np.ndarray | None, transfer: np.ndarray
    ) -> np.ndarray:
        """P_l (C_l r) on the node grid, in the transfer function's precision."""
        ny, nx = self._shape
        buffer = self._buffers.get(transfer.dtype)
        if buffer is None:  # zero padding stays zero: only [:ny, :nx] is ever written
            buffer = self._buffers[transfer.dtype] = np.zeros(self.fft_shape, transfer.dtype)
        if weight is None:
            buffer[:ny, :nx] = residual
        else:
            np.multiply(weight, residual, out=buffer[:ny, :nx], casting="same_kind")
        spectrum = scipy.fft.rfft2(buffer, workers=-1)
        spectrum *= transfer
        out = scipy.fft.irfft2(spectrum, s=self.fft_shape, workers=-1, overwrite_x=True)
        return out[:ny, :nx]

    def apply(self, residual: np.ndarray) -> np.ndarray:
        """Approximate K⁻¹ r (m) for a residual *r* (Pa) of shape (ny, nx)."""
        out = np.zeros(self._shape) if self._local is None else self._local * residual
        transfers = self._transfer_single if self.single else self._transfer
        work = None
        for weight, transfer in zip(self._weights, transfers, strict=True):
            solved = self._spectral(residual, weight, transfer)
            if weight is None:
                out += solved
            else:
                work = np.multiply(weight, solved, out=work)
                out += work
        return out


BAND_RESIDUAL_NEGLIGIBLE = 1e-3
"""Relative size ||r_B|| / ||r|| of the residual on the band below which the first band
solve of :class:`MultiplicativePreconditioner` is skipped."""

MAX_FACTOR_BYTES = 1.5 * 2**30
"""Cap on the estimated memory of the band's LU factors (bytes)."""

FACTOR_BYTES_PER_NODE_CELL = 60.0
"""Estimated LU factor memory per band node and per node across the band (bytes): COLAMD
fill measured at 3-5 non-zeros per node per cell of band width, 12 bytes each. The symmetric
ordering now used fills less (22 M against 36 M entries on the benchmark's step at 1024²),
so the estimate errs on the safe side."""


def steep_nodes(operator: PlateOperator, sharp: np.ndarray | None = None) -> np.ndarray:
    """Nodes where the rigidity changes more than :data:`SHARP_RATIO` within one flexural
    parameter (of the smallest non-zero rigidity) in x or y, away from *sharp* nodes (a
    sharp jump is steep all round; its own band covers that).

    A smooth but steep margin (Te 60 -> 10 km over 120 km) is as hard for the blend as a
    step: measured 75 iterations without the band, 25 with it.
    """
    rigidity = operator.rigidity
    plate = rigidity > 0
    if not plate.any():
        return np.zeros(rigidity.shape, dtype=bool)
    positive = rigidity[plate]
    alpha = STEEP_WINDOW * (4.0 * float(positive.min()) / operator.stiffness) ** 0.25
    filled = np.where(plate, rigidity, positive.max())
    steep = np.zeros(rigidity.shape, dtype=bool)
    for axis, (edge, h) in enumerate(zip(operator.edges, (operator.dy, operator.dx), strict=True)):
        size = [1, 1]
        size[axis] = 2 * int(alpha / h) + 1
        mode = "wrap" if edge == "periodic" else "nearest"
        high = scipy.ndimage.maximum_filter(filled, size=size, mode=mode)
        low = scipy.ndimage.minimum_filter(filled, size=size, mode=mode)
        found = high > SHARP_RATIO * low
        if sharp is not None:
            found &= ~scipy.ndimage.maximum_filter(sharp, size=size, mode=mode)
        steep |= found
    return steep


def sharp_nodes(operator: PlateOperator) -> np.ndarray:
    """The sharp nodes of :func:`sharp_band`, before widening (bool, shape (ny, nx))."""
    rigidity = operator.rigidity
    modes = ["wrap" if e == "periodic" else "nearest" for e in operator.edges]
    high = rigidity
    low = rigidity
    for axis, mode in enumerate(modes):
        size = [1, 1]
        size[axis] = 3
        high = scipy.ndimage.maximum_filter(high, size=size, mode=mode)
        low = scipy.ndimage.minimum_filter(low, size=size, mode=mode)
    sharp = high > SHARP_RATIO * low
    sharp |= steep_nodes(operator, sharp)
    if operator.edges[0] != "periodic":
        sharp[[0, -1], :] = True
    if operator.edges[1] != "periodic":
        sharp[:, [0, -1]] = True
    return sharp


def sharp_band(
    operator: PlateOperator, width: float, max_nodes: int, sharp: np.ndarray | None = None
) -> tuple[np.ndarray, float, np.ndarray]:
    """Nodes within *width* (m) of a sharp feature; the width shrinks to respect *max_nodes*.

    Sharp: the rigidity in the 3 x 3 neighbourhood varies by more than :data:`SHARP_RATIO`
    (a zero next to a non-zero value counts), or it does so within a flexural parameter
    (:func:`steep_nodes`), or the node lies on a non-periodic grid edge.

    Parameters
    ----------
    operator : PlateOperator
        The operator whose rigidity and edges define the features.
    width : float
        Distance (m) by which the sharp nodes are widened.
    max_nodes : int
        Cap on the band size. The width is halved until the band fits, in nodes and in the
        estimated memory of its LU factors (:data:`MAX_FACTOR_BYTES`), down to one
        spacing; if even that does not fit, the band is empty and the blend works alone.
    sharp : numpy.ndarray of bool, optional
        The sharp nodes if already found (:func:`sharp_nodes`).

    Returns
    -------
    nodes : numpy.ndarray of int
        Sorted flat indices of the band.
    width : float
        The width used (m); 0 when the band was dropped or there is no sharp feature.
    sharp : numpy.ndarray of bool, shape (ny, nx)
        The sharp nodes before widening.
    """
    if sharp is None:
        sharp = sharp_nodes(operator)
    if not sharp.any():
        return np.zeros(0, dtype=np.int64), 0.0, sharp
    distance = scipy.ndimage.distance_transform_edt(~sharp, sampling=(operator.dy, operator.dx))
    minimum = max(operator.dx, operator.dy)
    width = max(float(width), minimum)
    spacing = min(operator.dx, operator.dy)
    while True:
        band = distance <= width
        count = int(band.sum())
        factor_bytes = FACTOR_BYTES_PER_NODE_CELL * count * (2.0 * width / spacing + 1.0)
        if count <= max_nodes and factor_bytes <= MAX_FACTOR_BYTES:
            return np.flatnonzero(band), width, sharp
        if width <= minimum:
            break
        width = max(0.5 * width, minimum)
    log.warning(
        "the sharp features alone (%d nodes, about %.1f GiB of LU factors) exceed the band "
        "cap (%d nodes, %.1f GiB); solving without the band (more iterations)",
        count, factor_bytes / 2**30, max_nodes, MAX_FACTOR_BYTES / 2**30,
    )
    return np.zeros(0, dtype=np.int64), 0.0, sharp


@dataclass(eq=False)
class BandSolver:
    """Exact solve of K restricted to a set of nodes B (sparse LU), zero elsewhere.

    Also keeps K on the band's neighbourhood C (B widened by the stencil radius, 2 nodes),
    so that K v for v supported on B, and (K z) on B for any z, cost a sparse product on the
    band instead of a full operator application.
    """

    nodes: np.ndarray
    _shape: tuple[int, int]
    _solve: Callable[[np.ndarray], np.ndarray] | None
    _around: np.ndarray
    _band_in_around: np.ndarray
    _k_columns: object  # K[C, B], csr
    _k_rows: object  # K[B, C], csr

    @classmethod
    def build(cls, operator: PlateOperator, nodes: np.ndarray) -> BandSolver:
        """Assemble K on the band's neighbourhood and factorise K on the band."""
        empty = np.zeros(0, dtype=np.int64)
        if nodes.size == 0:
            return cls(nodes, operator.shape, None, empty, empty, None, None)
        band = np.zeros(operator.shape, dtype=np.uint8)
        band.flat[nodes] = 1
        modes = ["wrap" if e == "periodic" else "constant" for e in operator.edges]
        around = np.flatnonzero(scipy.ndimage.maximum_filter(band, size=5, mode=modes))
        k_around = operator.matrix(around)
        position = np.searchsorted(around, nodes)
        k_rows = k_around[position, :].tocsr()  # row slices are cheap in CSR
        k_columns = k_rows.T.tocsr()  # K is symmetric: K[C, B] = K[B, C]^T
        # K_BB is symmetric positive definite: a symmetric fill-reducing ordering with
        # diagonal pivots (measured on the step of tests/benchmarks/variable.py at 1024²:
        # 22 M factor entries and 1.0-1.9 s, against 36 M and 1.8-2.9 s with COLAMD)
        factor = spla.splu(
            k_rows[:, position].tocsc(), permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
            options={"SymmetricMode": True},
        )
        log.info("band LU of %d nodes", nodes.size)  # (factor.L builds a copy: not asked)
        return cls(nodes, operator.shape, factor.solve, around, position, k_columns, k_rows)

    @property
    def size(self) -> int:
        """Number of band nodes."""
        return int(self.nodes.size)

    def solve_band(self, residual_band: np.ndarray) -> np.ndarray:
        """K_BB⁻¹ r_B (values on the band nodes)."""
        assert self._solve is not None
        return self._solve(residual_band)

    def apply(self, residual: np.ndarray) -> np.ndarray:
        """K_BB⁻¹ r_B on the band nodes, 0 elsewhere."""
        out = np.zeros(self._shape)
        if self._solve is not None:
            out.flat[self.nodes] = self._solve(residual.ravel()[self.nodes])
        return out

    def subtract_product(self, residual: np.ndarray, values_band: np.ndarray) -> np.ndarray:
        """r − K v for v given on the band (zero elsewhere); a new array."""
        out = residual.copy()
        out.flat[self._around] -= self._k_columns @ values_band
        return out

    def residual_band(self, residual: np.ndarray, z: np.ndarray) -> np.ndarray:
        """(r − K z) on the band nodes."""
        return residual.ravel()[self.nodes] - self._k_rows @ z.ravel()[self._around]


@dataclass(eq=False)
class MultiplicativePreconditioner:
    """Symmetric multiplicative combination: band, blend on the remaining residual, band.

    z₁ = B r;  z₂ = z₁ + M (r − K z₁);  z = z₂ + B (r − K z₂),
    with B the band solve and M the blend. Symmetric by construction; without a band it is
    the blend alone. The two products with K are taken on the band only.
    """

    operator: PlateOperator
    blend: BlendPreconditioner
    band: BandSolver
    switch_norm: float = 0.0
    """Residual norm below which the blend runs in double precision (0: from the start)."""

    def apply(self, residual: np.ndarray) -> np.ndarray:
        """Preconditioned residual z (m) for a residual r (Pa).

        When r is (to :data:`BAND_RESIDUAL_NEGLIGIBLE`) zero on the band, z₁ = B r vanishes
        and the first band solve is skipped. Conjugate gradients started from
        :meth:`initial_guess` keep their residuals zero on the band, since (K z)_B = r_B for
        every z returned here, so each iteration costs one band solve: the deflation
        preconditioner "A-DEF2" with its special starting vector, equivalent in exact
        arithmetic to the symmetric form (Tang, Nabben, Vuik & Erlangga 2009, J. Sci.
        Comput. 39, "Comparison of two-level preconditioners derived from deflation,
        domain decomposition and multigrid methods"; recalled from memory).
        """
        norm = float(np.linalg.norm(residual))
        if self.blend.single and norm < self.switch_norm:
            self.blend.single = False
            log.debug("blend FFTs now in double precision")
        band = self.band
        if band.size == 0:
            return self.blend.apply(residual)
        on_band = residual.ravel()[band.nodes]
        if float(np.linalg.norm(on_band)) <= BAND_RESIDUAL_NEGLIGIBLE * norm:
            z = self.blend.apply(residual)  # the blend's weights are zero on the band
        else:
            first = band.solve_band(on_band)
            z = self.blend.apply(band.subtract_product(residual, first))
            z.flat[band.nodes] += first
        z.flat[band.nodes] += band.solve_band(band.residual_band(residual, z))
        return z

    def initial_guess(self, rhs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Start x₀ = B b (exact on the band, zero elsewhere) and its residual b − K x₀,
        which is zero on the band (set exactly)."""
        x = np.zeros(rhs.shape)
        band = self.band
        if band.size == 0:
            return x, rhs.copy()
        on_band = band.solve_band(rhs.ravel()[band.nodes])
        x.flat[band.nodes] = on_band
        residual = band.subtract_product(rhs, on_band)
        residual.flat[band.nodes] = 0.0
        return x, residual
