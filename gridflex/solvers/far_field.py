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

from dataclasses import dataclass, field

import numpy as np
import scipy.fft
import scipy.sparse
from scipy import special

from gridflex.grid import GridSpec
from gridflex.memory import check_memory
from gridflex.solvers.blas_threads import single_threaded_blas

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

LOW_RANK_TOLERANCE = 1e-14
"""Largest relative Frobenius-norm error of the low-rank factors Q (Qᵀ H) that replace each
Hankel matrix H (radii x nodes) in the field evaluations (:meth:`FarField.radial_profiles`).
The matrices are smooth in r and k: numerical rank 31 to 34 at 1e-12 to 1e-14 of the
largest singular value for 1709 radii and 517 nodes (the te-grid half-space of
tests/benchmarks/history.py te-grid), so one evaluation reads about a tenth of the
numbers."""

LOW_RANK_COLUMNS = (48, 96, 192)
"""Ranks tried in turn for the factors of :data:`LOW_RANK_TOLERANCE` (random range finder);
the full matrix is kept when none reaches it or a rank is not below a quarter of the
nodes."""


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


def _range_basis(matrix: np.ndarray) -> np.ndarray | None:
    """An orthonormal basis Q of the numerical column space of *matrix*, with
    ||matrix − Q Qᵀ matrix||_F <= :data:`LOW_RANK_TOLERANCE` ||matrix||_F, by the random
    range finder (Halko, Martinsson & Tropp 2011, SIAM Review 53, 217–288, "Finding
    structure with randomness"; recalled from memory) with a fixed seed; None when no
    rank of :data:`LOW_RANK_COLUMNS` below a quarter of the columns reaches it."""
    rng = np.random.default_rng(0)
    scale = float(np.linalg.norm(matrix))
    if scale == 0.0:
        return None
    for columns in LOW_RANK_COLUMNS:
        if 4 * columns > matrix.shape[1]:
            return None
        basis, _ = np.linalg.qr(matrix @ rng.standard_normal((matrix.shape[1], columns)))
        error = float(np.linalg.norm(matrix - basis @ (basis.T @ matrix)))
        if error <= LOW_RANK_TOLERANCE * scale:
            return np.ascontiguousarray(basis)
    return None


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
    hankel0: np.ndarray
    hankel1: np.ndarray
    hankel_trace: np.ndarray
    hankel2: np.ndarray
    rows: np.ndarray
    cols: np.ndarray
    kernels: np.ndarray
    interpolation: scipy.sparse.csr_matrix
    offsets: tuple[np.ndarray, np.ndarray]
    radial_step: float
    cell_area: float
    state: np.ndarray
    moments: np.ndarray
    _factors: dict[str, np.ndarray] = field(default_factory=dict, repr=False)

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
        kr = radii[:, None] * nodes[None, :]
        common = weights * nodes / (2.0 * np.pi)
        j0 = special.j0(kr)
        hankel0 = j0 * (common * taper)
        moment_common = common * moment_taper
        hankel1 = special.j1(kr) * (moment_common * nodes)
        hankel_trace = j0 * (moment_common * (-0.25 * nodes**2))
        hankel2 = special.jv(2, kr) * (moment_common * (0.5 * nodes**2))
        oy = np.arange(spec.ny) * spec.dy - cy
        ox = np.arange(spec.nx) * spec.dx - cx
        interpolation = _interpolation_matrix(oy, ox, step, radii.size)
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
            interpolation,
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
        return _interpolation_matrix(gy, gx, self.radial_step, self.hankel0.shape[0])

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
        return np.asarray(matrix @ self.radial_profiles(modes))

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
    def _low_rank(self) -> dict[str, np.ndarray]:
        """Orthonormal bases Q of the column spaces of the Hankel matrices (one for J0,
        shared by :attr:`hankel0` and :attr:`hankel_trace`, one for J1, one for J2) and
        the matrices Qᵀ H, made on first use; empty when a matrix has no low-rank form
        within :data:`LOW_RANK_TOLERANCE`."""
        if self._factors:  # (or {"full": ...} when there is no low-rank form)
            return self._factors
        factors: dict[str, np.ndarray] = {}
        groups = {
            "0": (self.hankel0, self.hankel_trace),
            "1": (self.hankel1,),
            "2": (self.hankel2,),
        }
        with single_threaded_blas():
            for key, matrices in groups.items():
                basis = _range_basis(np.hstack(matrices))
                if basis is None:
                    self._factors = {"full": np.zeros(0)}
                    return self._factors
                factors["q" + key] = basis
                for i, matrix in enumerate(matrices):
                    factors[f"b{key}{i}"] = basis.T @ matrix
        self._factors = factors
        return factors

    def radial_profiles(self, modes: np.ndarray) -> np.ndarray:
        """The radial profiles of the field of *modes* (J0 part, then the two J1 and the
        two J2 parts, each on the radial grid), from the low-rank factors of the Hankel
        matrices when they have one (:data:`LOW_RANK_TOLERANCE`)."""
        factors = self._low_rank()
        if "full" in factors:
            return self._radial(modes)
        # einsum, not BLAS: a small matrix-vector product in BLAS costs a thread start-up
        zero = np.einsum("mk,k->m", factors["b00"], modes[0])
        zero += np.einsum("mk,k->m", factors["b01"], modes[3])
        first = np.einsum("mk,jk->jm", factors["b10"], modes[1:3])
        second = np.einsum("mk,jk->jm", factors["b20"], modes[4:6])
        return np.concatenate(
            [
                np.einsum("rm,m->r", factors["q0"], zero),
                np.einsum("rm,jm->jr", factors["q1"], first).ravel(),
                np.einsum("rm,jm->jr", factors["q2"], second).ravel(),
            ]
        )

    def _radial(self, modes: np.ndarray) -> np.ndarray:
        # einsum, not BLAS: a small matrix-vector product in BLAS costs a thread start-up
        return np.concatenate(
            [
                np.einsum("rk,k->r", self.hankel0, modes[0])
                + np.einsum("rk,k->r", self.hankel_trace, modes[3]),
                np.einsum("rk,jk->jr", self.hankel1, modes[1:3]).ravel(),
                np.einsum("rk,jk->jr", self.hankel2, modes[4:6]).ravel(),
            ]
        )

    def _field(self, modes: np.ndarray) -> np.ndarray:
        ny, nx = self.offsets[0].size, self.offsets[1].size
        return self.field_with(self.interpolation, modes).reshape(ny, nx)

    def field(self) -> np.ndarray:
        """Deflection (m) of the far part on the window now."""
        return self._field(self.state)

    def equilibrium_field(self) -> np.ndarray:
        """Deflection (m) of the far part in equilibrium with the moments acting now."""
        return self._field(self.moments[:, None] * self.transfer)

    def rate_field(self) -> np.ndarray:
        """dw/dt (m s⁻¹) of the far part now, under the moments acting now."""
        return self._field((self.moments[:, None] * self.transfer - self.state) * self.rates)
