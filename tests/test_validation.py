"""The shared argument checks (gridflex.validation), constants and progress type."""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr

import gridflex.constants as constants
from gridflex.errors import InputError
from gridflex.progress import Progress
from gridflex.validation import (
    check_choice,
    check_density,
    check_flag,
    check_integer,
    check_number,
)

# --- check_number ---------------------------------------------------------------------


@pytest.mark.parametrize("value", [True, False, "25", "25 km", 1 + 2j, None, [1.0], np.array(1.0)])
def test_check_number_refuses_what_is_not_a_real_number(value):
    with pytest.raises(InputError) as caught:
        check_number("te", value, unit="m")
    message = str(caught.value)
    assert message.startswith("te must be a finite number")
    assert "(m)" in message
    assert message.endswith(f"got {value!r}")


@pytest.mark.parametrize("value", [math.nan, math.inf, -math.inf, np.float64("nan")])
def test_check_number_refuses_non_finite_values(value):
    with pytest.raises(InputError, match=r"^gravity must be a finite number, got"):
        check_number("gravity", value)


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        (3, 3.0),
        (2.5, 2.5),
        (np.float64(2.5), 2.5),
        (np.float32(0.5), 0.5),
        (np.int64(1030), 1030.0),
        (np.int8(-4), -4.0),
    ],
)
def test_check_number_accepts_python_and_numpy_reals_as_python_floats(value, expected):
    out = check_number("x", value)
    assert type(out) is float
    assert out == expected


def test_check_number_minimum_is_inclusive_unless_strict():
    assert check_number("width", 0.0, minimum=0.0) == 0.0
    with pytest.raises(InputError, match=r"width must be a finite number > 0 \(m\), got 0\.0"):
        check_number("width", 0.0, unit="m", minimum=0.0, strict=True)
    with pytest.raises(InputError, match=r"width must be a finite number >= 0, got -1e-09"):
        check_number("width", -1e-9, minimum=0.0)
    assert check_number("width", 1e-300, minimum=0.0, strict=True) == 1e-300


def test_check_number_maximum_is_inclusive():
    assert check_number("porosity", 1.0, minimum=0.0, maximum=1.0) == 1.0
    with pytest.raises(
        InputError, match=r"porosity must be a finite number >= 0 and <= 1, got 1\.5"
    ):
        check_number("porosity", 1.5, minimum=0.0, maximum=1.0)


def test_input_error_is_a_value_error():
    with pytest.raises(ValueError, match="te"):
        check_number("te", "thick")


# --- check_density --------------------------------------------------------------------


def test_check_density_accepts_zero_by_default_and_refuses_it_when_asked():
    assert check_density("infill_density", 0.0) == 0.0  # air
    assert check_density("ice_density", np.int64(917)) == 917.0
    with pytest.raises(InputError, match=r"mantle_density must be a finite number > 0 \(kg/m\^3\)"):
        check_density("mantle_density", 0, allow_zero=False)


@pytest.mark.parametrize("value", [-1.0, "1030", True, math.nan])
def test_check_density_refuses_negative_and_non_numbers(value):
    with pytest.raises(InputError) as caught:
        check_density("water_density", value)
    assert str(caught.value).startswith("water_density must be a finite number >= 0 (kg/m^3)")
    assert str(caught.value).endswith(repr(value))


# --- check_integer --------------------------------------------------------------------


def test_check_integer_accepts_python_and_numpy_integers():
    assert check_integer("max_iterations", 300, minimum=1) == 300
    out = check_integer("max_iterations", np.int64(7), minimum=1)
    assert type(out) is int and out == 7


@pytest.mark.parametrize("value", [True, 3.0, np.float64(3.0), "3", None])
def test_check_integer_refuses_bools_floats_and_strings(value):
    with pytest.raises(InputError) as caught:
        check_integer("max_iterations", value)
    assert str(caught.value) == f"max_iterations must be a whole number, got {value!r}"


def test_check_integer_bounds_are_inclusive():
    assert check_integer("n", 1, minimum=1, maximum=3) == 1
    assert check_integer("n", 3, minimum=1, maximum=3) == 3
    with pytest.raises(InputError, match=r"n must be a whole number >= 1 and <= 3, got 0"):
        check_integer("n", 0, minimum=1, maximum=3)
    with pytest.raises(InputError, match=r"got 4$"):
        check_integer("n", 4, minimum=1, maximum=3)


# --- check_choice and check_flag ------------------------------------------------------


def test_check_choice_returns_the_value_or_names_the_choices():
    assert check_choice("edges", "periodic", ("infinite", "periodic")) == "periodic"
    with pytest.raises(InputError) as caught:
        check_choice("edges", "wobbly", ("infinite", "periodic"))
    assert str(caught.value) == "edges must be one of 'infinite', 'periodic'; got 'wobbly'"


@pytest.mark.parametrize("value", [None, 1, ("infinite",), b"infinite"])
def test_check_choice_refuses_what_is_not_a_string(value):
    with pytest.raises(InputError, match=r"edges must be one of"):
        check_choice("edges", value, ["infinite"])


def test_check_flag_accepts_python_and_numpy_bools_only():
    assert check_flag("compaction", True) is True
    assert check_flag("compaction", np.bool_(False)) is False
    for value in (1, 0, "yes", None):
        with pytest.raises(InputError) as caught:
            check_flag("compaction", value)
        assert str(caught.value) == f"compaction must be true or false, got {value!r}"


# --- the checks at the library's boundary ---------------------------------------------


def test_library_entry_points_use_the_shared_checks():
    from gridflex.basin.staging import StagedBasin
    from gridflex.loads import load_from_layers
    from gridflex.plate import Plate

    grid = xr.DataArray(
        np.zeros((8, 8)), dims=("y", "x"), coords={"y": np.arange(8.0), "x": np.arange(8.0)}
    )
    # a numpy integer density is a number; a string is not
    basin = StagedBasin(grid, Plate(te=1e4), water_density=np.int64(1030))
    assert basin.water_density == 1030.0
    with pytest.raises(InputError, match=r"water_density must be a finite number >= 0.*'1030'"):
        StagedBasin(grid, Plate(te=1e4), water_density="1030")
    with pytest.raises(
        InputError, match=r"gravity must be a finite number > 0 \(m/s\^2\), got True"
    ):
        load_from_layers(0.0, [(grid, 900.0)], gravity=True)
    # air (0) fills the deflection of a plate in air; a zero mantle is refused
    assert Plate(te=1e4, infill_density=0).infill_density == 0.0
    with pytest.raises(InputError, match=r"mantle_density must be a finite number > 0"):
        Plate(te=1e4, mantle_density=0.0, infill_density=0.0)


# --- constants and the progress type --------------------------------------------------


def test_constants():
    # the Julian year of 365.25 days of 86400 s (common practice)
    assert constants.SECONDS_PER_YEAR == 365.25 * 86400.0 == 3.15576e7
    assert constants.DAYS_PER_YEAR == 365.25
    # G: CODATA 2018 (Tiesinga et al. 2021, "CODATA recommended values of the fundamental
    # physical constants: 2018", Rev. Mod. Phys. 93, 025010)
    assert constants.GRAVITATIONAL_CONSTANT == 6.67430e-11
    # 1 Gal = 1 cm/s^2 (common practice)
    assert constants.MGAL == 1e-3 * 1e-2
    # rounded standard gravity 9.80665 m/s^2 and sea water of ~1030 kg/m^3 (common practice)
    assert abs(constants.DEFAULT_GRAVITY - 9.80665) < 0.005
    assert constants.SEA_WATER_DENSITY == 1030.0


def test_one_progress_type_is_shared():
    import gridflex.basin.staging
    import gridflex.engine
    import gridflex.glacial.response
    import gridflex.infill
    import gridflex.solvers.finite_difference

    for module in (
        gridflex.basin.staging,
        gridflex.engine,
        gridflex.glacial.response,
        gridflex.infill,
        gridflex.solvers.finite_difference,
    ):
        assert module.Progress is Progress, module.__name__


def test_progress_is_called_with_done_and_total():
    from gridflex.glacial.response import viscous_response
    from gridflex.plate import Plate

    x = np.arange(16) * 20e3
    q = np.zeros((4, 16, 16))
    q[:, 6:10, 6:10] = 5e6
    history = xr.DataArray(
        q, dims=("time", "y", "x"), coords={"time": [0.0, 1e2, 1e3, 1e4], "y": x, "x": x}
    )
    calls: list[tuple[int, int]] = []

    def progress(done: int, total: int) -> None:
        calls.append((done, total))

    viscous_response(history, Plate(te=20e3, infill_density=0.0), progress=progress)
    assert calls == [(1, 3), (2, 3), (3, 3)]


# --- check_grid_range -----------------------------------------------------------------


def test_check_grid_range_names_the_count_and_the_worst_value():
    from gridflex.validation import check_grid_range

    values = np.array([[1.0, -2.0, np.nan], [-0.5, 3.0, 0.0]])
    with pytest.raises(InputError, match=r"a\.nc: variable 'h': 2 cell\(s\) below 0, down to -2 "):
        check_grid_range(values, "thickness", "a.nc: variable 'h'")
    check_grid_range(np.abs(values), "thickness", "a.nc")  # NaN cells are not checked


@pytest.mark.parametrize(
    ("role", "good", "bad", "worst"),
    [
        # deepest trench ~11 km, highest summit < 9 km (common knowledge)
        ("elevation", [-10.9e3, 8.8e3], [11.5e3, -12e3, 0.0], "-12000"),
        ("depth", [10.9e3], [-11.2e3], "-11200"),
        # thickest ice on the present ice sheets < 5 km (common knowledge, from memory)
        ("ice_thickness", [0.0, 4.9e3], [5.2e3, 6e3], "6000"),
        ("elastic_thickness", [0.0, 120e3], [-1.0], "-1"),
    ],
)
def test_check_grid_range_per_role(role, good, bad, worst):
    from gridflex.validation import check_grid_range

    check_grid_range(np.array(good), role, "g.nc")
    with pytest.raises(InputError, match=rf"g\.nc: .* {worst} "):
        check_grid_range(np.array(bad), role, "g.nc")


def test_check_grid_range_unknown_role():
    from gridflex.validation import check_grid_range

    with pytest.raises(InputError, match="unknown grid role 'rock'"):
        check_grid_range(np.zeros(2), "rock", "g.nc")
