"""The far-field split of the half-space: what leaves the spectrum, what comes back."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, special

from gridflex.grid import GridSpec
from gridflex.solvers.far_field import FarField, step_factors
from gridflex.solvers.viscous import padded_forward

SPEC = GridSpec(24, 30, 20e3, 25e3)
SHAPE = (72, 90)
STIFFNESS, ETA, D = 3300 * 9.81, 1e21, 1e23


def _load() -> np.ndarray:
    rng = np.random.default_rng(7)
    return rng.uniform(0.0, 1e7, SPEC.shape)


def test_split_removes_the_net_force_and_first_moment():
    # After the split the grid's load has no net force and no first moment about the
    # window centre (common practice: what makes its periodic copies negligible).
    far = FarField.build(SPEC, SHAPE, D, STIFFNESS, ETA)
    load = _load()
    spectrum = padded_forward(load, SHAPE)
    moments = far.split(load, spectrum)
    assert spectrum[0, 0] == 0
    rest = np.fft.irfft2(spectrum, s=SHAPE)
    y = np.arange(SHAPE[0])[:, None] * SPEC.dy - 0.5 * (SPEC.ny - 1) * SPEC.dy
    x = np.arange(SHAPE[1])[None, :] * SPEC.dx - 0.5 * (SPEC.nx - 1) * SPEC.dx
    # moments about the centre, on the nearest periodic image
    y = (y + SHAPE[0] * SPEC.dy / 2) % (SHAPE[0] * SPEC.dy) - SHAPE[0] * SPEC.dy / 2
    x = (x + SHAPE[1] * SPEC.dx / 2) % (SHAPE[1] * SPEC.dx) - SHAPE[1] * SPEC.dx / 2
    scale = np.abs(load).sum()
    assert abs(rest.sum()) < 1e-12 * scale
    # (the taken-out blob's far tail wraps round the periodic grid: seen 5e-5)
    assert abs((rest * y).sum()) < 2e-4 * scale * SPEC.dy * SPEC.ny
    assert abs((rest * x).sum()) < 2e-4 * scale * SPEC.dx * SPEC.nx

    assert moments[0] == pytest.approx(load.sum() * SPEC.cell_area, rel=1e-12)


def test_far_field_in_equilibrium_is_its_hankel_transform():
    # The radial quadrature (Simpson in ln k) against scipy.integrate.quad of
    # 1/(2 pi) int phi(k) F / beta(k) J0(k r) k dk (the definition, module docstring).
    far = FarField.build(SPEC, SHAPE, D, STIFFNESS, ETA)
    load = np.zeros(SPEC.shape)
    load[11, 14] = 1e9  # net force near the centre, small first moment
    spectrum = padded_forward(load, SHAPE)
    far.moments = far.split(load, spectrum)
    far.moments[1:] = 0.0  # the monopole alone
    field = far.equilibrium_field()
    k_c = 8 * 2 * np.pi / min(SHAPE[0] * SPEC.dy, SHAPE[1] * SPEC.dx)
    force = far.moments[0]
    cy, cx = 0.5 * (SPEC.ny - 1) * SPEC.dy, 0.5 * (SPEC.nx - 1) * SPEC.dx
    for i, j in [(0, 0), (11, 14), (20, 3)]:
        r = np.hypot(i * SPEC.dy - cy, j * SPEC.dx - cx)

        def integrand(k, r=r):
            taper = np.exp(-((k / k_c) ** 8))
            return taper * force / (D * k**4 + STIFFNESS) * special.j0(k * r) * k / (2 * np.pi)

        exact = integrate.quad(integrand, 0.0, 2 * k_c, limit=400, epsabs=0)[0]
        # linear interpolation on the radial grid (1/64 of 1/k_c): seen 3e-4
        assert field[i, j] == pytest.approx(exact, rel=1e-3), (i, j)


def test_rate_is_the_derivative_of_the_field():
    # d/dt of the exact per-mode update (Bueler et al. 2007, PHYSICS.md 7.5): the far
    # field's rate 100 yr after loading against a centred difference over +-1 yr
    # (common practice).
    far = FarField.build(SPEC, SHAPE, D, STIFFNESS, ETA)
    load = _load()
    moments = far.split(load, padded_forward(load, SHAPE))
    year = 3.15576e7

    def from_rest(years: float) -> FarField:
        far.state = np.zeros_like(far.state)
        far.moments = moments
        far.step(
            step_factors(far.rates, far.transfer, years * year, "previous"), moments, "previous"
        )
        return far

    rate = from_rest(100.0).rate_field()
    central = (from_rest(101.0).field() - from_rest(99.0).field()) / (2 * year)
    assert_allclose(rate, central, rtol=0, atol=1e-3 * np.abs(rate).max())
