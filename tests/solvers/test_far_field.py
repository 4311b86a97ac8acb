"""The far-field split of the half-space: what leaves the spectrum, what comes back."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, special

from gridflex.grid import GridSpec
from gridflex.solvers.far_field import CUTOFF_CYCLES, FarField, step_factors
from gridflex.solvers.viscous import SpectralRelaxation, padded_forward

SPEC = GridSpec(24, 30, 20e3, 25e3)
SHAPE = (72, 90)
STIFFNESS, ETA, D = 3300 * 9.81, 1e21, 1e23


def _load() -> np.ndarray:
    rng = np.random.default_rng(7)
    return rng.uniform(0.0, 1e7, SPEC.shape)


def test_split_removes_the_net_force_first_and_second_moments():
    # After the split the grid's load has no net force, first or second moment about
    # the window centre (common practice: what makes its periodic copies negligible).
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
    length = max(SPEC.dy * SPEC.ny, SPEC.dx * SPEC.nx)
    assert abs(rest.sum()) < 1e-12 * scale
    # Gaussian tapers: the taken-out part's tail round the periodic grid is negligible
    for weight in (y, x):
        assert abs((rest * weight).sum()) < 1e-9 * scale * length
    for weight in (x * x + y * y, x * x - y * y, x * y):
        assert abs((rest * weight).sum()) < 1e-9 * scale * length**2

    oy = np.arange(SPEC.ny)[:, None] * SPEC.dy - 0.5 * (SPEC.ny - 1) * SPEC.dy
    ox = np.arange(SPEC.nx)[None, :] * SPEC.dx - 0.5 * (SPEC.nx - 1) * SPEC.dx
    expected = [
        load.sum(),
        (load * oy).sum(),
        (load * ox).sum(),
        (load * (ox**2 + oy**2)).sum(),
        0.5 * (load * (ox**2 - oy**2)).sum(),
        (load * ox * oy).sum(),
    ]
    assert_allclose(moments, np.array(expected) * SPEC.cell_area, rtol=1e-12)


def _k_g() -> float:
    return CUTOFF_CYCLES * 2 * np.pi / min(SHAPE[0] * SPEC.dy, SHAPE[1] * SPEC.dx)


@pytest.mark.parametrize(
    ("moment", "order", "power", "angular"),
    [
        (0, 0, 0, None),  # net force: phi_F F / beta J0 k
        (1, 1, 1, "sin"),  # first moment along y: phi p_y sin(phi) / beta J1 k^2
        (2, 1, 1, "cos"),  # along x
        (3, 0, 2, None),  # trace: -phi T k^2 / 4 / beta J0 k
        (4, 2, 2, "cos2"),  # quadrupole A: phi A k^2 / 2 cos(2 phi) / beta J2 k
        (5, 2, 2, "sin2"),  # quadrupole B
    ],
)
def test_far_field_in_equilibrium_is_its_hankel_transform(moment, order, power, angular):
    # The radial quadrature (Simpson in ln k) and the interpolation against
    # scipy.integrate.quad of the Hankel transforms in the module docstring (the 2-D
    # Fourier transform of f(k) e^{i n theta} is i^n e^{i n phi} int f J_n(k r) k dk / 2 pi;
    # Bracewell 2000, The Fourier Transform and Its Applications, ch. 13), one moment at
    # a time, each set to 1 in its own units.
    far = FarField.build(SPEC, SHAPE, D, STIFFNESS, ETA)
    far.moments = np.zeros(6)
    far.moments[moment] = 1.0
    field = far.equilibrium_field()
    k_g = _k_g()
    cy, cx = 0.5 * (SPEC.ny - 1) * SPEC.dy, 0.5 * (SPEC.nx - 1) * SPEC.dx
    scale = 1.0
    for i, j in [(0, 0), (11, 14), (20, 3), (5, 27)]:
        dy, dx = i * SPEC.dy - cy, j * SPEC.dx - cx
        r, direction = np.hypot(dy, dx), np.arctan2(dy, dx)

        def integrand(k, r=r):
            s = (k / k_g) ** 2
            taper = np.exp(-s) * (1 + s + s * s / 2) if moment == 0 else np.exp(-s)
            factor = (1.0, 1.0, 1.0, -0.25, 0.5, 0.5)[moment]
            return (
                taper
                * factor
                * k**power
                / (D * k**4 + STIFFNESS)
                * special.jv(order, k * r)
                * k
                / (2 * np.pi)
            )

        radial = integrate.quad(integrand, 0.0, 8 * k_g, limit=400, epsabs=0)[0]
        weight = {
            None: 1.0,
            "sin": np.sin(direction),
            "cos": np.cos(direction),
            "cos2": np.cos(2 * direction),
            "sin2": np.sin(2 * direction),
        }[angular]
        exact = radial * weight
        if (i, j) == (0, 0):
            scale = abs(radial)
        # linear interpolation on the radial grid (1/128 of 1/k_g)
        assert field[i, j] == pytest.approx(exact, rel=1e-3, abs=1e-6 * scale), (i, j)


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


def test_split_equilibrium_equals_the_unsplit_response():
    # Grid part plus far part in equilibrium against the plain FFT response on a grid
    # padded eight times as wide (no split): the split must add up to the same field
    # for an asymmetric load with all six moments (common practice: superposition).
    spec = GridSpec(32, 40, 25e3, 25e3)
    rng = np.random.default_rng(3)
    load = np.zeros(spec.shape)
    load[4:20, 22:38] = rng.uniform(0.0, 3e7, (16, 16))  # off centre, corner-heavy
    engine = SpectralRelaxation.build(
        spec, D, STIFFNESS, "half-space", ETA, 3000.0, "previous", width_factor=0.5
    )
    engine.set_load(load)
    split = engine.equilibrium()
    big = (8 * spec.ny, 8 * spec.nx)
    ky = 2 * np.pi * np.fft.fftfreq(big[0], spec.dy)[:, None]
    kx = 2 * np.pi * np.fft.rfftfreq(big[1], spec.dx)[None, :]
    transfer = 1.0 / (D * (kx**2 + ky**2) ** 2 + STIFFNESS)
    plain = np.fft.irfft2(np.fft.rfft2(load, s=big) * transfer, s=big)[: spec.ny, : spec.nx]
    assert np.abs(split - plain).max() < 1e-4 * np.abs(plain).max()


@pytest.mark.parametrize(("ny", "nx"), [(24, 30), (25, 31), (7, 40)])
def test_window_by_quadrant_symmetry_equals_interpolation_on_every_cell(ny, nx):
    # The window's field is taken on one quadrant and mirrored with the signs of the
    # angular factors (cos phi_y, cos phi_x, sin 2 phi are odd under a mirror; common
    # practice); it must equal the plain interpolation onto every cell, odd sizes too.
    from gridflex.solvers.far_field import _interpolation_matrix

    spec = GridSpec(ny, nx, 20e3, 25e3)
    far = FarField.build(spec, (3 * ny, 3 * nx), D, STIFFNESS, ETA)
    profiles = np.random.default_rng(3).normal(size=5 * far.hankel0.matrix.shape[0])
    oy, ox = far.offsets
    every_cell = _interpolation_matrix(oy, ox, far.radial_step, far.hankel0.matrix.shape[0])
    expected = (every_cell @ profiles).reshape(ny, nx)
    assert_allclose(far.window.field(profiles), expected, rtol=0, atol=1e-13)
    # with a base (the strided window of a wider array, as an inverse transform gives):
    # the field plus the base, bit for bit (the sum of two numbers either way round)
    wide = np.random.default_rng(4).normal(size=(ny, nx + 9))
    base = wide[:, :nx]
    assert np.array_equal(far.window.field(profiles, base), base + far.window.field(profiles))


@pytest.mark.parametrize("order", [0, 1, 2])
def test_hankel_sums_with_the_series_part_equal_the_full_sums(order):
    # Nodes far below 1 / r are summed through the power series of J_n (Abramowitz &
    # Stegun 1964, Handbook of Mathematical Functions, 9.1.10); the sums must equal the
    # full matrix of J_n(k r) at every radius to round-off, for modes of any shape.
    from gridflex.solvers.far_field import _HankelSum

    far = FarField.build(SPEC, SHAPE, D, STIFFNESS, ETA)
    radii = np.arange(far.hankel0.matrix.shape[0]) * far.radial_step
    weights = np.random.default_rng(4).uniform(0.5, 1.5, far.nodes.size) * far.nodes
    hankel = _HankelSum.build(far.nodes, order, weights, radii)
    assert hankel.low.sum() > far.nodes.size // 2  # most nodes go through the series
    full = special.jv(order, radii[:, None] * far.nodes[None, :]) * weights
    modes = np.random.default_rng(5).normal(size=(2, far.nodes.size))
    expected = modes @ full.T
    assert_allclose(hankel.apply(modes), expected, rtol=0, atol=1e-13 * np.abs(expected).max())
    assert_allclose(
        hankel.apply(modes[0]), expected[0], rtol=0, atol=1e-13 * np.abs(expected).max()
    )
