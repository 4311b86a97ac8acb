"""The longest wavelengths of the viscous half-space, on the infinite plane.

A plate over a viscous half-space (Bueler, Lingle & Brown 2007, *Ann. Glaciol.* 46,
97–105) relaxes the mode of wavenumber k with tau(k) = 2 eta k / beta(k), beta = D k⁴ +
Δρ g, which tends to zero as k → 0. Just after a load F is applied the surface sinks at
the rate of the viscous (Stokes) half-space, F / (4 pi eta r), a field that decays only
like 1 / r; the integral of w over the plane is F / Δρ g at once, but it is carried by
wavelengths that grow without bound (k below Δρ g t / (2 eta)). A periodic FFT grid
samples the spectrum at multiples of 2 pi / L: its k = 0 mode makes the whole padded
domain sink by F / (Δρ g L²) at once, and its periodic images add the 1 / r tails of
all the copies of the load (metres where the truth is centimetres after a year).

Split of the spectrum (an Ewald-type split, common practice in lattice sums): about the
window centre x_c the load spectrum is the Taylor series of e^{−i k·(x − x_c)} summed
over the load::

    Q(k) = e^{−i k·x_c} (F − i k·p − ½ k·M·k + O(k³))
         = e^{−i k·x_c} (F − i k (p_x cos θ + p_y sin θ)
                         − ½ k² (T / 2 + A cos 2θ + B sin 2θ) + O(k³))

(F the net force, p the first moment, M the second moment about x_c, T = M_xx + M_yy,
A = (M_xx − M_yy) / 2, B = M_xy; θ the direction of k). With s = (k / k_g)², the net
force is tapered by phi_F = e^{−s} (1 + s + s² / 2) (1 − phi_F = O(k⁶)) and the other
terms by phi = e^{−s} (1 − phi = O(k²), so O(k³) and O(k⁴) are left behind); both have
Gaussian tails in real space.

* The periodic engine is driven by Q(k) less the tapered terms: no net force, first or
  second moment, so its field decays like that of an octupole (1 / r⁴ right after
  loading) and the periodic copies of the padded domain are small; its k = 0 mode is
  zero at all times.
* The rest is carried by a 1-D set of modes m(k, t) per moment at quadrature nodes in k
  (logarithmic from 1e-10 k_g up to 6 k_g), each obeying the same per-mode equation
  2 eta k dm/dt + beta m = F(t) (and p(t), T(t), A(t), B(t)), advanced by the same exact
  exponential update. Its field on the infinite plane is a sum of Hankel transforms of
  orders 0, 1 and 2 (r = |x − x_c|, φ the direction of x − x_c; the angular factor
  e^{i n θ} of a spectrum becomes i^n J_n(k r) e^{i n φ})::

      w_far(x) = 1/(2 pi) ∫ (phi_F m_F − phi k² m_T / 4) J0(k r) k dk
               + (p_x cos φ + p_y sin φ) 1/(2 pi) ∫ phi m_p(k) J1(k r) k² dk  [per unit p]
               + (A cos 2φ + B sin 2φ) 1/(2 pi) ∫ phi (k² / 2) m(k) J2(k r) k dk  [per unit]

  evaluated on a radial grid through the window and interpolated linearly to the cells.

The sum is the response on the infinite plane up to the octupole's periodic copies and
the quadrature; everything is linear, so the uplift rate is split the same way and
equals −dw/dt of the deflection. Numpy arrays, SI units, times in seconds.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.fft
import scipy.sparse
from scipy import special

from gridflex.grid import GridSpec
from gridflex.memory import check_memory

__all__ = ["CUTOFF_CYCLES", "MOMENTS", "FarField", "step_factors"]

CUTOFF_CYCLES = 3.0
"""k_g, the scale of the split's tapers, in cycles over the shorter side L of the padded
grid. The tapers are Gaussian (times a polynomial for the net force), so the far part's
real-space tail falls like exp(−(k_g r)² / 4) and is negligible at the periodic copies;
the moment terms grow like (k R) and (k R)² times the net force (R the load's extent),
so k_g must not be large either. Measured on a disc filling the grid, an off-centre
pair of loads and a load in a corner, padding half a grid width on each side (the
default; against the same steppers padded four widths): k_g = 1.6, 2.3, 3, 4 and 5 cycles
gave the largest uplift-rate error (pointwise, where the rate is >= 10 % of its peak) of
2.1, 1.4, 1.2, 1.1 and 1.0 % at 1-10 yr (the corner load) and at 10-100 kyr 3.0, 0.67,
0.20, 0.18 and 0.71 %. An earlier split took
only the net force and first moment out under exp(−(k / k_c)⁸): that taper's slow,
oscillating tail carried the (k R)² terms round the periodic grid (0.2 % of the peak in
equilibrium) and the second moment's images gave 11 % at 1 yr in a corner
(tests/benchmarks/far_field_padding.py prints these cases)."""

MOMENTS = 6
"""Moments split off the load: net force, first moment (y, x), and the second moment as
its trace and two quadrupole parts (see :meth:`FarField.sums`)."""

_TOP = 6.0  # last node, in k_g: the tapers there are below 2e-13
_DECADES = 10.0  # nodes from 1e-10 k_g: the part below weighs < F k_min^2 / (4 pi Δρ g)
_PER_DECADE = 48
_RADIAL_STEP = 1.0 / 128.0  # radial grid spacing, in 1 / k_g
_SERIES_REACH = 0.1
"""Nodes with k r <= this at the farthest radius are summed through the power series of
J_n (Abramowitz & Stegun 1964, 9.1.10) instead of one matrix column each: with
:data:`_SERIES_TERMS` terms the first term left out is below 1e-23 of the first, and
about three quarters of the nodes (all that lie decades below k_g) become a few columns,
so a field costs a quarter of the reads of the full matrices."""
_SERIES_TERMS = 6


def step_factors(
    rates: np.ndarray | float, transfer: np.ndarray | float, dt: float, interpolation: str
) -> tuple:
    """Factors of the exact per-mode update over *dt* (s) (see
    :mod:`gridflex.solvers.viscous`): ``(E, (1 − E) T)`` for ``"previous"``,
    ``(E, (phi − E) T, (1 − phi) T)`` for ``"linear"``, with E = exp(−dt rate),
    phi = (1 − E) / (dt rate) (0 where the rate is infinite) and T the transfer."""
    x = dt * rates
    decay = np.exp(-x)
    if interpolation == "previous":
        return (decay, (1.0 - decay) * transfer)
    with np.errstate(divide="ignore", invalid="ignore"):
        phi_modes = np.where(np.isinf(x), 0.0, -np.expm1(-x) / x)
    phi = phi_modes if isinstance(x, np.ndarray) else float(phi_modes)
    return (decay, (phi - decay) * transfer, (1.0 - phi) * transfer)


_PROFILES = 5
"""Radial profiles of the far field, stacked: the monopole with the isotropic part of
the second moment (J0), the dipole along y and along x (J1) and the two quadrupoles
(J2, cos 2φ and sin 2φ)."""


def _interpolation_matrix(
    oy: np.ndarray, ox: np.ndarray, step: float, n_r: int
) -> scipy.sparse.csr_matrix:
    """Linear interpolation in r of the stacked radial profiles (see :data:`_PROFILES`)
    times their angular factors (1, cos φ_y, cos φ_x, cos 2φ, sin 2φ) at the cells of
    offsets *oy* x *ox* from the centre, as one sparse matrix of two entries per profile
    and cell onto the stacked profiles (5 *n_r*)."""
    cells = oy.size * ox.size
    entries = 2 * _PROFILES
    check_memory(
        entries * 12.0 * cells + 8.0 * 6 * cells, f"far-field interpolation on {cells} cells"
    )
    yy = np.broadcast_to(oy[:, None], (oy.size, ox.size)).ravel()
    xx = np.broadcast_to(ox[None, :], (oy.size, ox.size)).ravel()
    r = np.hypot(yy, xx)
    position = r / step
    index = np.minimum(position.astype(np.int32), n_r - 2)
    fraction = position - index
    safe = np.where(r > 0, r, 1.0)
    cos_y, cos_x = np.where(r > 0, yy / safe, 0.0), np.where(r > 0, xx / safe, 0.0)
    angular = (np.ones_like(r), cos_y, cos_x, cos_x**2 - cos_y**2, 2.0 * cos_x * cos_y)
    below = 1.0 - fraction
    columns = np.stack(
        [c for p in range(_PROFILES) for c in (index + p * n_r, index + 1 + p * n_r)], axis=1
    ).ravel()
    values = np.stack([v for a in angular for v in (below * a, fraction * a)], axis=1).ravel()
    pointers = np.arange(0, entries * cells + 1, entries, dtype=np.int64)
    return scipy.sparse.csr_matrix((values, columns, pointers), shape=(cells, _PROFILES * n_r))


@dataclass
class _SymmetricWindow:
    """Linear interpolation of the stacked radial profiles onto the window, whose cell
    offsets from the centre are symmetric: one sparse product gives, on one quadrant
    (rows and columns up to the centre), the parts that keep their sign in every
    quadrant (monopole and cos 2φ) and the three that change it (sin 2φ, cos φ_y,
    cos φ_x); the four quadrants are their signed sums. A quarter of the entries of a
    matrix over every cell, no dense products."""

    shape: tuple[int, int]
    matrix: scipy.sparse.csr_matrix
    """(4 x quadrant cells, stacked profiles): the parts even, sin 2φ, cos φ_y, cos φ_x."""

    @classmethod
    def build(cls, oy: np.ndarray, ox: np.ndarray, step: float, n_r: int) -> _SymmetricWindow:
        """For offsets *oy*, *ox* (m, increasing, symmetric about 0) and a radial grid of
        *n_r* points *step* apart (m)."""
        hy, hx = (oy.size + 1) // 2, (ox.size + 1) // 2
        cells = hy * hx
        # ten entries of 12 bytes per quadrant cell, their build, the parts
        check_memory(240.0 * cells, f"far-field interpolation on {cells} cells")
        yy, xx = oy[:hy, None], ox[None, :hx]
        r = np.hypot(yy, xx).ravel()
        position = r / step
        index = np.minimum(position.astype(np.int64), n_r - 2)
        fraction = position - index
        below = 1.0 - fraction
        safe = np.where(r > 0, r, 1.0)
        cos_y = np.where(r > 0, np.broadcast_to(yy, (hy, hx)).ravel() / safe, 0.0)
        cos_x = np.where(r > 0, np.broadcast_to(xx, (hy, hx)).ravel() / safe, 0.0)
        cos_2, sin_2 = cos_x**2 - cos_y**2, 2.0 * cos_x * cos_y

        def pair(profile: int, factor: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
            first = index + profile * n_r
            columns = np.stack([first, first + 1], axis=1)
            return columns, np.stack([below * factor, fraction * factor], axis=1)

        # profiles: 0 monopole, 1 dipole y, 2 dipole x, 3 cos 2φ, 4 sin 2φ
        (c0, v0), (c3, v3) = pair(0, 1.0), pair(3, cos_2)
        parts = [
            (np.concatenate([c0, c3], axis=1), np.concatenate([v0, v3], axis=1)),
            pair(4, sin_2),
            pair(1, cos_y),
            pair(2, cos_x),
        ]
        columns = np.concatenate([c.ravel() for c, _ in parts])
        values = np.concatenate([v.ravel() for _, v in parts])
        counts = np.repeat([4, 2, 2, 2], cells)
        pointers = np.concatenate([[0], np.cumsum(counts)])
        matrix = scipy.sparse.csr_matrix(
            (values, columns, pointers), shape=(4 * cells, _PROFILES * n_r)
        )
        return cls((oy.size, ox.size), matrix)

    def field(self, profiles: np.ndarray, base: np.ndarray | None = None) -> np.ndarray:
        """The field (window shape) of the stacked profiles (see :data:`_PROFILES`), a
        new array; with *base* (window shape, any strides: say the window of a larger
        inverse transform) the field plus *base* in that array, bit for bit
        ``base + field`` (the sum of two numbers is the same either way round)."""
        ny, nx = self.shape
        hy, hx = (ny + 1) // 2, (nx + 1) // 2
        even, odd_both, along_y, along_x = (self.matrix @ profiles).reshape(4, hy, hx)
        plus, minus = even + odd_both, even - odd_both
        same, opposite = along_y + along_x, along_y - along_x
        out = np.empty(self.shape)
        # the middle row or column of an odd size is written twice with equal values
        np.add(plus, same, out=out[:hy, :hx])
        np.subtract(minus, opposite, out=out[ny - hy :, :hx][::-1])
        np.add(minus, opposite, out=out[:hy, nx - hx :][:, ::-1])
        np.subtract(plus, same, out=out[ny - hy :, nx - hx :][::-1, ::-1])
        if base is not None:  # (adding it quadrant by quadrant was slower, measured)
            out += base
        return out


def _series_split(
    nodes: np.ndarray, order: int, weights: np.ndarray, radii: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Hankel sum of *order* over *nodes* with *weights*, J_n(k r) weights_k at *radii*,
    as ``(matrix, series, low)``: the columns of the nodes above the series' reach, then
    :data:`_SERIES_TERMS` columns (r / R)^(n + 2j); *series* (terms x low nodes) maps the
    low nodes' modes onto those columns; *low* marks them."""
    reach = float(radii[-1])  # > 0: the radial grid has at least two points
    low = nodes * reach <= _SERIES_REACH
    high = ~low
    dense = special.jv(order, radii[:, None] * nodes[None, high]) * weights[high]
    j = np.arange(_SERIES_TERMS)
    powers = order + 2 * j
    scaled = (radii / reach)[:, None] ** powers[None, :]
    coefficients = (-1.0) ** j / (special.factorial(j) * special.factorial(j + order))
    half = 0.5 * nodes[low] * reach
    series = coefficients[:, None] * half[None, :] ** powers[:, None] * weights[low]
    return np.concatenate([dense, scaled], axis=1), series, low


@dataclass
class _HankelSum:
    """One Hankel sum on the radial grid: Σ_k J_n(k r) w_k m_k for mode vectors m."""

    matrix: np.ndarray
    series: np.ndarray
    low: np.ndarray

    @classmethod
    def build(
        cls, nodes: np.ndarray, order: int, weights: np.ndarray, radii: np.ndarray
    ) -> _HankelSum:
        """See :func:`_series_split`."""
        return cls(*_series_split(nodes, order, weights, radii))

    def reduced(self, modes: np.ndarray) -> np.ndarray:
        """*modes* (..., nodes) as the matrix's columns: the high nodes, then the series
        terms of the low ones."""
        if not self.low.any():
            return modes
        return np.concatenate(
            [modes[..., ~self.low], np.einsum("tk,...k->...t", self.series, modes[..., self.low])],
            axis=-1,
        )

    def apply(self, modes: np.ndarray) -> np.ndarray:
        """Σ_k J_n(k r) w_k m_k at every radius, for one mode vector or a stack of them."""
        # one einsum per vector, not BLAS (a small matrix-vector product in BLAS costs a
        # thread start-up) and not one einsum over the stack (a slower loop in numpy)
        reduced = self.reduced(modes)
        if reduced.ndim == 1:
            return np.einsum("rk,k->r", self.matrix, reduced)
        return np.stack([np.einsum("rk,k->r", self.matrix, m) for m in reduced])


def _force_taper(x: np.ndarray) -> np.ndarray:
    """exp(−x²) (1 + x² + x⁴ / 2): 1 − taper = O(x⁶), Gaussian tail in real space."""
    x2 = x * x
    return np.exp(-x2) * (1.0 + x2 * (1.0 + 0.5 * x2))


def _simpson_weights(n: int, step: float) -> np.ndarray:
    """Composite Simpson weights for *n* (odd) equally spaced nodes."""
    weights = np.full(n, 2.0)
    weights[1::2] = 4.0
    weights[0] = weights[-1] = 1.0
    return weights * step / 3.0


@dataclass
class FarField:
    """Net force, first and second moments of the load, and their response on the
    infinite plane.

    Create with :meth:`build`; the engine calls :meth:`split` on every load spectrum,
    :meth:`step` with the moments it returned, and adds :meth:`field` /
    :meth:`rate_field` to its own inverse transforms.
    """

    nodes: np.ndarray
    rates: np.ndarray
    transfer: np.ndarray
    hankel0: _HankelSum
    hankel1: _HankelSum
    hankel_trace: _HankelSum
    hankel2: _HankelSum
    rows: np.ndarray
    cols: np.ndarray
    kernels: np.ndarray
    window: _SymmetricWindow
    offsets: tuple[np.ndarray, np.ndarray]
    radial_step: float
    cell_area: float
    state: np.ndarray
    moments: np.ndarray

    @classmethod
    def build(
        cls,
        spec: GridSpec,
        shape: tuple[int, int],
        rigidity: float,
        stiffness: float,
        viscosity: float,
        whole_grid: bool = False,
    ) -> FarField:
        """Nodes, Hankel matrices and the low-wavenumber block of the FFT grid *shape*
        (the window at its first rows and columns, as the engine pads). With
        *whole_grid* the radial grid reaches every cell of *shape* (nearest periodic
        image), for :meth:`grid_interpolation`."""
        ny_pad, nx_pad = shape
        k_g = CUTOFF_CYCLES * 2.0 * np.pi / min(ny_pad * spec.dy, nx_pad * spec.dx)
        # quadrature in u = ln k: int f dk = int f k du, Simpson on an odd node count
        count = int(round((_DECADES + np.log10(_TOP)) * _PER_DECADE)) | 1
        u = np.linspace(np.log(k_g) - _DECADES * np.log(10.0), np.log(_TOP * k_g), count)
        nodes = np.exp(u)
        weights = _simpson_weights(count, u[1] - u[0]) * nodes
        beta = rigidity * nodes**4 + stiffness
        rates = beta / (2.0 * viscosity * nodes)
        taper = _force_taper(nodes / k_g)
        moment_taper = np.exp(-((nodes / k_g) ** 2))
        # radial grid through the window (distances from its centre)
        cy, cx = 0.5 * (spec.ny - 1) * spec.dy, 0.5 * (spec.nx - 1) * spec.dx
        reach = float(np.hypot(cy, cx))
        if whole_grid:
            reach = max(reach, float(np.hypot(ny_pad * spec.dy, nx_pad * spec.dx)) / 2)
        step = _RADIAL_STEP / k_g
        radii = np.arange(int(np.ceil(reach / step)) + 2) * step
        common = weights * nodes / (2.0 * np.pi)
        moment_common = common * moment_taper
        hankel0 = _HankelSum.build(nodes, 0, common * taper, radii)
        hankel1 = _HankelSum.build(nodes, 1, moment_common * nodes, radii)
        hankel_trace = _HankelSum.build(nodes, 0, moment_common * (-0.25 * nodes**2), radii)
        hankel2 = _HankelSum.build(nodes, 2, moment_common * (0.5 * nodes**2), radii)
        oy = np.arange(spec.ny) * spec.dy - cy
        ox = np.arange(spec.nx) * spec.dx - cx
        window = _SymmetricWindow.build(oy, ox, step, radii.size)
        # low-wavenumber block of the FFT grid where phi is not negligible
        top = _TOP * k_g
        my = min(int(np.ceil(top * ny_pad * spec.dy / (2 * np.pi))), ny_pad // 2 - 1)
        mx = min(int(np.ceil(top * nx_pad * spec.dx / (2 * np.pi))), nx_pad // 2 - 1)
        rows = np.r_[0 : my + 1, ny_pad - my : ny_pad]
        cols = np.arange(mx + 1)
        ky = 2.0 * np.pi * np.fft.fftfreq(ny_pad, spec.dy)[rows][:, None]
        kx = 2.0 * np.pi * np.fft.rfftfreq(nx_pad, spec.dx)[cols][None, :]
        block_k = np.hypot(ky, kx)
        at_centre = np.exp(-1j * (ky * cy + kx * cx))
        shift = _force_taper(block_k / k_g) * at_centre
        moment_shift = np.exp(-((block_k / k_g) ** 2)) * at_centre
        # Q - phi e^{-ik.xc} (S0 - i ky S1y - i kx S1x - k^2 T / 4 - (kx^2 - ky^2) A / 2
        # - kx ky B), S, T, A, B in DFT units (sums over cells, see sums)
        kernels = np.stack(
            [
                shift,
                -1j * ky * moment_shift,
                -1j * kx * moment_shift,
                -0.25 * (kx**2 + ky**2) * moment_shift,
                -0.5 * (kx**2 - ky**2) * moment_shift,
                -(kx * ky) * moment_shift,
            ]
        )
        return cls(
            nodes,
            rates,
            1.0 / beta,
            hankel0,
            hankel1,
            hankel_trace,
            hankel2,
            rows,
            cols,
            kernels,
            window,
            (oy, ox),
            step,
            spec.cell_area,
            np.zeros((MOMENTS, count)),
            np.zeros(MOMENTS),
        )

    # -- the split -----------------------------------------------------------------
    def split(self, load: np.ndarray, spectrum: np.ndarray) -> np.ndarray:
        """Take the net force, first and second moments out of *spectrum* (in place) and
        return them, ``(F, p_y, p_x, T, A, B)`` in N, N m and N m² (the sums of
        :meth:`sums` times the cell area).

        *spectrum* is the DFT of *load* zero-padded as the engine does; its k = 0 value
        is the net force, so after the split that mode is exactly zero."""
        sums = self.sums(load, float(spectrum[0, 0].real))
        block = np.ix_(self.rows, self.cols)
        # einsum, not BLAS: a thread start-up costs more than this small sum
        spectrum[block] -= np.einsum("j,jab->ab", sums, self.kernels)
        spectrum[0, 0] = 0.0
        return sums * self.cell_area

    def sums(self, load: np.ndarray, total: float | None = None) -> np.ndarray:
        """Moments of *load* about the window centre as sums over the window's cells
        (Pa, Pa m, Pa m²): ``Σ q``, ``Σ q y'``, ``Σ q x'``, the trace ``Σ q (x'² + y'²)``,
        ``Σ q (x'² − y'²) / 2`` and ``Σ q x' y'`` (x', y' the offsets from the centre);
        *total* replaces Σ q when the caller has it (the k = 0 value of a spectrum)."""
        oy, ox = self.offsets
        by_row, by_column = load.sum(axis=1), load.sum(axis=0)
        first = float(by_row.sum()) if total is None else total
        yy, xx = float(by_row @ oy**2), float(by_column @ ox**2)
        return np.array(
            [
                first,
                float(by_row @ oy),
                float(by_column @ ox),
                xx + yy,
                0.5 * (xx - yy),
                float(oy @ (load @ ox)),
            ]
        )

    def grid_interpolation(self, shape: tuple[int, int], dy: float, dx: float):
        """Interpolation of the far field onto every cell of the periodic grid *shape*
        (the window at its first cells), at the nearest periodic image of the window
        centre; needs a FarField built with ``whole_grid=True``."""
        oy, ox = self.offsets
        cy, cx = -float(oy[0]), -float(ox[0])
        ly, lx = shape[0] * dy, shape[1] * dx
        gy = (np.arange(shape[0]) * dy - cy + ly / 2) % ly - ly / 2
        gx = (np.arange(shape[1]) * dx - cx + lx / 2) % lx - lx / 2
        return _interpolation_matrix(gy, gx, self.radial_step, self.hankel0.matrix.shape[0])

    def real_basis(self, shape: tuple[int, int]) -> np.ndarray:
        """The loads (per unit sum of :meth:`sums`, on the periodic grid *shape*) that
        :meth:`split` takes out of a spectrum, in real space: Σ_j sums_j basis_j is the far
        part of a load."""
        basis = np.empty((MOMENTS, *shape))
        for j in range(MOMENTS):
            spectrum = np.zeros((shape[0], shape[1] // 2 + 1), dtype=np.complex128)
            spectrum[np.ix_(self.rows, self.cols)] = self.kernels[j]
            basis[j] = scipy.fft.irfft2(spectrum, s=shape, workers=-1)
        return basis

    def modes_after(self, dt: float, new: np.ndarray, interpolation: str) -> np.ndarray:
        """The radial modes *dt* seconds on (towards the moments *new*), without
        advancing the state (for stage times inside a step)."""
        factors = self.factors(dt, interpolation)
        modes = self.state * factors[0]
        if interpolation == "previous":
            return modes + factors[1] * new[:, None]
        return modes + factors[1] * self.moments[:, None] + factors[2] * new[:, None]

    def field_with(self, matrix: scipy.sparse.csr_matrix, modes: np.ndarray) -> np.ndarray:
        """Far field (flat, m) of *modes* through an interpolation *matrix*."""
        return np.asarray(matrix @ self._radial(modes))

    def step(self, factors: tuple, new: np.ndarray, interpolation: str) -> None:
        """Advance the radial modes with *factors* (from :func:`step_factors` on
        :attr:`rates` and :attr:`transfer`) to the moments *new* acting afterwards."""
        state = self.state
        state *= factors[0]
        if interpolation == "previous":
            state += factors[1] * new[:, None]
        else:
            state += factors[1] * self.moments[:, None]
            state += factors[2] * new[:, None]
        self.moments = new

    def set_equilibrium(self) -> None:
        """Radial modes in equilibrium with the moments acting now."""
        self.state = self.moments[:, None] * self.transfer

    def factors(self, dt: float, interpolation: str) -> tuple:
        """Update factors of the radial modes over *dt* (s)."""
        return step_factors(self.rates, self.transfer, dt, interpolation)

    # -- fields ---------------------------------------------------------------------
    def _radial(self, modes: np.ndarray) -> np.ndarray:
        """The stacked radial profiles (see :data:`_PROFILES`) of *modes*."""
        return np.concatenate(
            [
                self.hankel0.apply(modes[0]) + self.hankel_trace.apply(modes[3]),
                self.hankel1.apply(modes[1:3]).ravel(),
                self.hankel2.apply(modes[4:6]).ravel(),
            ]
        )

    def _field(self, modes: np.ndarray, base: np.ndarray | None) -> np.ndarray:
        return self.window.field(self._radial(modes), base)

    def field(self, base: np.ndarray | None = None) -> np.ndarray:
        """Deflection (m) of the far part on the window now (plus *base*, a field on the
        window of any strides, when given: see :meth:`_SymmetricWindow.field`)."""
        return self._field(self.state, base)

    def equilibrium_field(self, base: np.ndarray | None = None) -> np.ndarray:
        """Deflection (m) of the far part in equilibrium with the moments acting now
        (plus *base*, as :meth:`field`)."""
        return self._field(self.moments[:, None] * self.transfer, base)

    def rate_field(self, base: np.ndarray | None = None) -> np.ndarray:
        """dw/dt (m s⁻¹) of the far part now, under the moments acting now (plus
        *base*, as :meth:`field`)."""
        return self._field((self.moments[:, None] * self.transfer - self.state) * self.rates, base)
