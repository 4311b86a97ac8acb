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

Split of the spectrum (an Ewald-type split, common practice in lattice sums): with
phi(k) = exp(−(k / k_c)⁸), the load spectrum near k = 0 is, about the window centre
x_c, Q(k) = e^{−i k·x_c} (F − i k·p + O(k²)) (F the net force, p the first moment).

* The periodic engine is driven by Q(k) − phi(k) e^{−i k·x_c} (F − i k·p): no net
  force and no first moment, so its field decays like that of a quadrupole (1 / r³
  right after loading) and the periodic copies of the padded domain are negligible;
  its k = 0 mode is zero at all times.
* The rest, phi(k) (F − i k·p) at x_c, is radially symmetric per moment and is carried
  by a 1-D set of modes m(k, t) at quadrature nodes in k (logarithmic from 1e-10 k_c up
  to 1.6 k_c), each obeying the same per-mode equation 2 eta k dm/dt + beta m = F(t)
  (and p(t)), advanced by the same exact exponential update. Its field on the infinite
  plane is a Hankel transform (r = |x − x_c|, e_r = (x − x_c) / r)::

      w_far(x) = 1/(2 pi) ∫ phi m_F(k) J0(k r) k dk + e_r · 1/(2 pi) ∫ phi m_p(k) J1(k r) k² dk

  evaluated on a radial grid through the window and interpolated linearly to the cells.

The sum is the response on the infinite plane up to the quadrupole's periodic copies
and the quadrature; everything is linear, so the uplift rate is split the same way and
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

__all__ = ["CUTOFF_CYCLES", "FarField", "step_factors"]

CUTOFF_CYCLES = 8.0
"""k_c in cycles over the shorter side of the padded grid: the split's far part spreads
over about 1 / k_c = L / (16 pi) and its tail over a few times that, well inside L / 2
(measured on the Bueler disc: 4, 6, 8 and 12 cycles gave the same centre; from 6 on the
far-field rate at 1 kyr was 0.2-0.3 % off instead of 1.7 % with 4)."""

_ORDER = 8  # phi = exp(-(k/k_c)^8): 1 - phi = O(k^8), no low-order term left behind
_TOP = 1.6  # last node in k_c; phi(1.6 k_c) = exp(-43)
_DECADES = 10.0  # nodes from 1e-10 k_c: the part below weighs < F k_min^2 / (4 pi Δρ g)
_PER_DECADE = 48
_RADIAL_STEP = 1.0 / 64.0  # radial grid spacing, in 1 / k_c


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


def _interpolation_matrix(
    oy: np.ndarray, ox: np.ndarray, step: float, n_r: int
) -> scipy.sparse.csr_matrix:
    """Linear interpolation in r of the three radial profiles (the two dipole profiles
    times the direction cosines) at the cells of offsets *oy* x *ox* from the centre, as
    one sparse matrix of 6 entries per cell onto the stacked profiles (3 *n_r*)."""
    cells = oy.size * ox.size
    check_memory(6.0 * 12.0 * cells + 8.0 * 4 * cells, f"far-field interpolation on {cells} cells")
    yy = np.broadcast_to(oy[:, None], (oy.size, ox.size)).ravel()
    xx = np.broadcast_to(ox[None, :], (oy.size, ox.size)).ravel()
    r = np.hypot(yy, xx)
    position = r / step
    index = np.minimum(position.astype(np.int32), n_r - 2)
    fraction = position - index
    safe = np.where(r > 0, r, 1.0)
    cos_y, cos_x = np.where(r > 0, yy / safe, 0.0), np.where(r > 0, xx / safe, 0.0)
    columns = np.stack(
        [index, index + 1, index + n_r, index + 1 + n_r, index + 2 * n_r, index + 1 + 2 * n_r],
        axis=1,
    ).ravel()
    below = 1.0 - fraction
    values = np.stack(
        [below, fraction, below * cos_y, fraction * cos_y, below * cos_x, fraction * cos_x],
        axis=1,
    ).ravel()
    pointers = np.arange(0, 6 * cells + 1, 6, dtype=np.int64)
    return scipy.sparse.csr_matrix((values, columns, pointers), shape=(cells, 3 * n_r))


def _simpson_weights(n: int, step: float) -> np.ndarray:
    """Composite Simpson weights for *n* (odd) equally spaced nodes."""
    weights = np.full(n, 2.0)
    weights[1::2] = 4.0
    weights[0] = weights[-1] = 1.0
    return weights * step / 3.0


@dataclass
class FarField:
    """Net force and first moment of the load, and their response on the infinite plane.

    Create with :meth:`build`; the engine calls :meth:`split` on every load spectrum,
    :meth:`step` with the moments it returned, and adds :meth:`field` /
    :meth:`rate_field` to its own inverse transforms.
    """

    nodes: np.ndarray
    rates: np.ndarray
    transfer: np.ndarray
    hankel0: np.ndarray
    hankel1: np.ndarray
    rows: np.ndarray
    cols: np.ndarray
    kernels: np.ndarray
    interpolation: scipy.sparse.csr_matrix
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
        k_c = CUTOFF_CYCLES * 2.0 * np.pi / min(ny_pad * spec.dy, nx_pad * spec.dx)
        # quadrature in u = ln k: int f dk = int f k du, Simpson on an odd node count
        count = int(round((_DECADES + np.log10(_TOP)) * _PER_DECADE)) | 1
        u = np.linspace(np.log(k_c) - _DECADES * np.log(10.0), np.log(_TOP * k_c), count)
        nodes = np.exp(u)
        weights = _simpson_weights(count, u[1] - u[0]) * nodes
        beta = rigidity * nodes**4 + stiffness
        rates = beta / (2.0 * viscosity * nodes)
        taper = np.exp(-((nodes / k_c) ** _ORDER))
        # radial grid through the window (distances from its centre)
        cy, cx = 0.5 * (spec.ny - 1) * spec.dy, 0.5 * (spec.nx - 1) * spec.dx
        reach = float(np.hypot(cy, cx))
        if whole_grid:
            reach = max(reach, float(np.hypot(ny_pad * spec.dy, nx_pad * spec.dx)) / 2)
        step = _RADIAL_STEP / k_c
        radii = np.arange(int(np.ceil(reach / step)) + 2) * step
        kr = radii[:, None] * nodes[None, :]
        common = weights * taper * nodes / (2.0 * np.pi)
        hankel0 = special.j0(kr) * common
        hankel1 = special.j1(kr) * (common * nodes)
        oy = np.arange(spec.ny) * spec.dy - cy
        ox = np.arange(spec.nx) * spec.dx - cx
        interpolation = _interpolation_matrix(oy, ox, step, radii.size)
        # low-wavenumber block of the FFT grid where phi is not negligible
        top = _TOP * k_c
        my = min(int(np.ceil(top * ny_pad * spec.dy / (2 * np.pi))), ny_pad // 2 - 1)
        mx = min(int(np.ceil(top * nx_pad * spec.dx / (2 * np.pi))), nx_pad // 2 - 1)
        rows = np.r_[0 : my + 1, ny_pad - my : ny_pad]
        cols = np.arange(mx + 1)
        ky = 2.0 * np.pi * np.fft.fftfreq(ny_pad, spec.dy)[rows][:, None]
        kx = 2.0 * np.pi * np.fft.rfftfreq(nx_pad, spec.dx)[cols][None, :]
        block_taper = np.exp(-((np.hypot(ky, kx) / k_c) ** _ORDER))
        shift = block_taper * np.exp(-1j * (ky * cy + kx * cx))
        # Q - phi e^{-ik.xc} (S0 - i ky S1y - i kx S1x), S in DFT units (sums over cells)
        kernels = np.stack([shift, -1j * ky * shift, -1j * kx * shift])
        return cls(
            nodes,
            rates,
            1.0 / beta,
            hankel0,
            hankel1,
            rows,
            cols,
            kernels,
            interpolation,
            (oy, ox),
            step,
            spec.cell_area,
            np.zeros((3, count)),
            np.zeros(3),
        )

    # -- the split -----------------------------------------------------------------
    def split(self, load: np.ndarray, spectrum: np.ndarray) -> np.ndarray:
        """Take the net force and first moment out of *spectrum* (in place) and return
        them, ``(F, p_y, p_x)`` in N and N m (the sums over cells times the cell area).

        *spectrum* is the DFT of *load* zero-padded as the engine does; its k = 0 value
        is the net force, so after the split that mode is exactly zero."""
        sums = self.sums(load, float(spectrum[0, 0].real))
        block = np.ix_(self.rows, self.cols)
        spectrum[block] -= np.tensordot(sums, self.kernels, axes=1)
        spectrum[0, 0] = 0.0
        return sums * self.cell_area

    def sums(self, load: np.ndarray, total: float | None = None) -> np.ndarray:
        """``(Σ q, Σ q (y − y_c), Σ q (x − x_c))`` over the window's cells (Pa, Pa m);
        *total* replaces Σ q when the caller has it (the k = 0 value of a spectrum)."""
        oy, ox = self.offsets
        first = float(load.sum()) if total is None else total
        return np.array([first, float(load.sum(axis=1) @ oy), float(load.sum(axis=0) @ ox)])

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
        """The three loads (per unit sum, on the periodic grid *shape*) that :meth:`split`
        takes out of a spectrum, in real space: Σ_j sums_j basis_j is the far part of a
        load."""
        basis = np.empty((3, *shape))
        for j in range(3):
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
        # einsum, not BLAS: a small matrix-vector product in BLAS costs a thread start-up
        return np.concatenate(
            [
                np.einsum("rk,k->r", self.hankel0, modes[0]),
                np.einsum("rk,jk->jr", self.hankel1, modes[1:]).ravel(),
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
