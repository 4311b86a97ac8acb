"""Plate parameters: rigidity, flexural parameter and validation."""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr

from gridflex import InputError, Plate, rigidity_from_te, te_from_rigidity


def test_rigidity_and_flexural_parameter():
    # D = E Te^3 / (12 (1 - nu^2)) and alpha = (4 D / (drho g))^(1/4):
    # Turcotte & Schubert 2002, Geodynamics, 2nd ed., eqs. 3-72 and 3-127 (from memory).
    plate = Plate(
        te=20e3,
        youngs_modulus=70e9,
        poisson_ratio=0.25,
        mantle_density=3300.0,
        infill_density=1000.0,
    )
    assert plate.rigidity == pytest.approx(70e9 * 20e3**3 / (12 * (1 - 0.25**2)), rel=1e-14)
    # PHYSICS.md table (computed with the same formula): D = 4.978e22 N m, alpha 54.5 km
    assert plate.rigidity == pytest.approx(4.978e22, rel=1e-3)
    assert plate.flexural_parameter == pytest.approx(54.5e3, rel=1e-3)
    assert plate.relative_stiffness_radius == pytest.approx(
        plate.flexural_parameter / math.sqrt(2), rel=1e-14
    )


def test_contract_defaults():
    plate = Plate(1e4)
    assert (
        plate.youngs_modulus,
        plate.poisson_ratio,
        plate.mantle_density,
        plate.infill_density,
        plate.gravity,
    ) == (1.0e11, 0.25, 3300.0, 1030.0, 9.81)


def test_te_zero_is_local():
    plate = Plate(te=0.0)
    assert plate.rigidity == 0.0 and plate.flexural_parameter == 0.0


def test_te_rigidity_roundtrip():
    d = rigidity_from_te(35e3, 1e11, 0.25)
    assert te_from_rigidity(d, 1e11, 0.25) == pytest.approx(35e3, rel=1e-12)
    assert Plate.from_rigidity(1e25).rigidity == pytest.approx(1e25, rel=1e-12)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"te": -1.0}, r"te must be a finite number >= 0.*-1\.0"),
        ({"te": float("nan")}, r"te must be a finite number >= 0.*nan"),
        ({"te": 1e4, "infill_density": 3300.0}, r"infill_density \(3300\.0\) must be less"),
        ({"te": 1e4, "infill_density": 3400.0}, r"infill_density \(3400\.0\)"),
        ({"te": 1e4, "youngs_modulus": 0.0}, r"youngs_modulus .*0\.0"),
        ({"te": 1e4, "youngs_modulus": -5e10}, r"youngs_modulus .*-5"),
        ({"te": 1e4, "poisson_ratio": 0.5}, r"poisson_ratio .*0\.5"),
        ({"te": 1e4, "poisson_ratio": 0.0}, r"poisson_ratio .*0\.0"),
        ({"te": 1e4, "poisson_ratio": -0.1}, r"poisson_ratio .*-0\.1"),
        ({"te": "thick"}, r"te must be a finite number.*'thick'"),
        ({"te": 1e4, "gravity": 0.0}, r"gravity .*0\.0"),
    ],
)
def test_invalid_parameters(kwargs, match):
    with pytest.raises(InputError, match=match):
        Plate(**kwargs)


def test_input_error_is_value_error():
    with pytest.raises(ValueError):
        Plate(te=-5.0)


def test_te_grid_checks():
    te = xr.DataArray(np.full((4, 4), 1e4), dims=("y", "x"))
    assert Plate(te).is_variable
    with pytest.raises(InputError, match="te grid must be >= 0"):
        Plate(te - 2e4)
    with pytest.raises(InputError, match="NaN"):
        Plate(te.where(te.x > 0))
