"""The finite-difference time stepping of a plate of variable rigidity."""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from gridflex.grid import GridSpec, padded_shape
from gridflex.solvers.finite_difference import FiniteDifferenceSolver
from gridflex.solvers.preconditioners import discrete_symbol
from gridflex.solvers.variable_relaxation import VariableRelaxation

YEAR = 3.15576e7
STIFFNESS, ETA, D = 3300.0 * 9.81, 1e21, 1e23


def _mode(n: int = 32, dx: float = 50e3, m: int = 2):
    """One cosine mode along x on a periodic grid, and its wavenumber and discrete symbol."""
    spec = GridSpec(n, n, dx, dx)
    x = np.arange(n) * dx
    load = 1e6 * np.cos(2 * np.pi * m * x / (n * dx))[None, :] * np.ones((n, 1))
    k = 2 * np.pi * m / (n * dx)
    s = discrete_symbol((n, n), dx, dx)[0, m]  # the 13-point stencil's own symbol
    return spec, load, k, s


@pytest.mark.parametrize("interpolation", ["linear", "previous"])
def test_single_mode_relaxes_with_the_half_space_time(interpolation):
    # Per-mode equation of the half-space model (Bueler, Lingle & Brown 2007, PHYSICS.md
    # 7.4) with the finite-difference operator's symbol: a load switched on at t = 0 gives
    # W = W_eq (1 - exp(-t / tau)), tau = 2 eta k / (D s^2 + drho g). The SDIRK2 step of
    # tau / 10 is second order: within 2e-4 of W_eq (seen 1.5e-4), and the rate is the
    # model's own (W_eq - W) / tau for the state reached (solve tolerance 1e-5).
    spec, load, k, s = _mode()
    beta = D * s * s + STIFFNESS
    tau = 2 * ETA * k / beta
    engine = VariableRelaxation.build(
        spec,
        np.full(spec.shape, D),
        STIFFNESS,
        0.25,
        "half-space",
        ETA,
        1.0,
        interpolation=interpolation,
        periodic=True,
    )
    assert engine.max_substep > tau / 10  # one step each, no sub-steps
    engine.set_load(load)
    w_eq = load / beta
    for n in range(1, 21):
        engine.step(tau / 10, load)
        expected = w_eq * (1 - math.exp(-n / 10))
        assert_allclose(engine.deflection(), expected, rtol=0, atol=2e-4 * w_eq.max())
    rate = (w_eq - engine.deflection()) / tau
    assert_allclose(engine.rate(), rate, rtol=0, atol=1e-4 * np.abs(rate).max())
    assert_allclose(engine.equilibrium(), w_eq, rtol=0, atol=1e-6 * w_eq.max())


def test_relaxing_single_mode_is_the_exact_exponential():
    # Le Meur & Huybrechts 1996: W = W_eq (1 - exp(-t / tau)) for any step (exact update).
    spec, load, _, s = _mode()
    tau = 3000.0 * YEAR
    engine = VariableRelaxation.build(
        spec, np.full(spec.shape, D), STIFFNESS, 0.25, "relaxing", ETA, tau, periodic=True
    )
    engine.set_load(load)
    w_eq = load / (D * s * s + STIFFNESS)
    engine.step(0.7 * tau, load)
    assert_allclose(
        engine.deflection(), w_eq * (1 - math.exp(-0.7)), rtol=0, atol=1e-6 * w_eq.max()
    )
    assert engine.solves == 1  # one equilibrium solve, kept for the next step
    engine.step(0.3 * tau, load)
    assert engine.solves == 1
    assert_allclose(
        engine.deflection(), w_eq * (1 - math.exp(-1.0)), rtol=0, atol=1e-6 * w_eq.max()
    )


def test_minimum_margin_widens_the_solve_grid_only_when_asked():
    # FiniteDifferenceSolver.build(min_margin=...) pads like the spectral half-space
    # (gridflex.grid.padded_shape) once the margin exceeds pad_factor flexural parameters.
    spec = GridSpec(24, 20, 10e3, 10e3)
    rigidity = np.full(spec.shape, 1e22)
    plain = FiniteDifferenceSolver.build(spec, rigidity, STIFFNESS, 0.25)
    same = FiniteDifferenceSolver.build(spec, rigidity, STIFFNESS, 0.25, min_margin=0.0)
    assert plain.shape == same.shape
    wide = FiniteDifferenceSolver.build(spec, rigidity, STIFFNESS, 0.25, min_margin=240e3)
    assert wide.shape == padded_shape(spec, 240e3)
    assert wide.shape[0] > plain.shape[0]


def test_steps_differing_by_round_off_share_one_set_up():
    # Times converted from dates give steps like 100 yr +- 1e-9: one solver set-up, and the
    # result of exactly equal steps to the solve accuracy (1e-6 of the peak; common practice).
    spec, load, _, _ = _mode(n=16)
    engines = []
    for jitter in (0.0, 1e-9):
        engine = VariableRelaxation.build(
            spec, np.full(spec.shape, D), STIFFNESS, 0.25, "half-space", ETA, 1.0, periodic=True
        )
        engine.set_load(load)
        for n in range(4):
            engine.step(100.0 * YEAR * (1.0 + jitter * (-1) ** n), load)
        engines.append(engine)
    assert len(engines[1]._step_solvers) == 1
    peak = np.abs(engines[0].deflection()).max()
    assert_allclose(engines[1].deflection(), engines[0].deflection(), rtol=0, atol=1e-6 * peak)


def test_kept_solutions_follow_their_step_set_up():
    # The stage solutions that start the next solves belong to one operator (one step
    # length): dropped with its set-up, kept for the ones in use (common practice: a
    # Galerkin start needs the products of the operator being solved).
    spec, load, _, _ = _mode(n=16)
    engine = VariableRelaxation.build(
        spec, np.full(spec.shape, D), STIFFNESS, 0.25, "half-space", ETA, 1.0, periodic=True
    )
    engine.set_load(load)
    lengths = [100.0 * YEAR, 200.0 * YEAR, 300.0 * YEAR]
    for h in lengths:
        engine.step(h, load)
    assert list(engine._step_solvers) == lengths[1:]  # one step each, two set-ups kept
    assert list(engine._histories) == lengths[1:]  # the first one's solutions dropped
    assert [key for key, _ in engine.kept_solutions()] == lengths[1:]
    assert all(len(history.solutions) == 2 for _, history in engine.kept_solutions())


def test_deflection_reuses_the_last_stage_far_field():
    # The far field of the state after a step is that of the second stage's driving (the
    # same radial modes), evaluated once on the solve grid; on the window it equals the
    # window's own evaluation (the same points, common practice) to round-off.
    spec = GridSpec(24, 24, 20e3, 20e3)
    j, i = np.indices(spec.shape)
    load = np.where(np.hypot(j - 11.5, i - 9.5) < 6, 910.0 * 9.81 * 1000.0, 0.0)
    engine = VariableRelaxation.build(
        spec, np.full(spec.shape, D), STIFFNESS, 0.25, "half-space", ETA, 1.0
    )
    assert engine.far is not None
    engine.set_load(0.5 * load)
    for _ in range(2):
        engine.step(100.0 * YEAR, load)
    evaluations = []
    field_with = engine.far.field_with

    def counted(matrix, modes):
        evaluations.append(1)
        return field_with(matrix, modes)

    engine.far.field_with = counted  # type: ignore[method-assign]
    w = engine.deflection()
    assert not evaluations  # taken from the second stage
    direct = engine.state[: spec.ny, : spec.nx] + engine.far.field()  # the window's own
    assert_allclose(w, direct, rtol=0, atol=1e-12 * np.abs(direct).max())
