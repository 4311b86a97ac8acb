"""FlexureBmi: the BMI 2.0 component, checked by the CSDMS bmi-tester suite and against
IceStepper."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from gridflex import IceStepper, InputError, Plate
from gridflex.bmi import FlexureBmi
from gridflex.synthetic import disc_height, empty_grid
from tests.helpers import REPO_ROOT

CONFIG = REPO_ROOT / "examples" / "bmi" / "config.toml"


def test_the_example_configuration_passes_the_csdms_bmi_tester():
    # The exact command of the issue and the README, run as CI runs it (bmi-tester comes
    # with the test extra): every stage must pass.
    bmi_test = Path(sys.executable).parent / "bmi-test"
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(REPO_ROOT), *sys.path])}
    done = subprocess.run(
        [
            str(bmi_test),
            "gridflex.bmi:FlexureBmi",
            "--config-file",
            "examples/bmi/config.toml",
            "--root-dir",
            "examples/bmi",
        ],
        cwd=REPO_ROOT,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-2000:]
    assert "All tests passed" in done.stderr
    assert " failed" not in done.stdout


def _small_config(folder: Path, extra: str = "") -> Path:
    path = folder / "flexure.toml"
    path.write_text(
        """
[grid]
rows = 24
columns = 24
spacing = "40 km"
[plate]
elastic_thickness = "50 km"
infill_density = 0.0
[mantle]
model = "relaxing"
relaxation_time = "3 kyr"
[solver]
edges = "periodic"
[bed]
elevation = "-100 m"
[time]
step = "200 yr"
end = "2 kyr"
"""
        + extra
    )
    return path


def test_bmi_updates_equal_an_ice_stepper_driven_by_hand(tmp_path):
    # The component is IceStepper behind the BMI calls: same numbers bit for bit.
    bmi = FlexureBmi()
    bmi.initialize(str(_small_config(tmp_path)))
    grid = empty_grid(24, 24, 40e3)
    stepper = IceStepper(
        grid - 100.0,
        Plate(te=50e3, infill_density=0.0),
        "relaxing",
        relaxation_time=3000.0,
        edges="periodic",
    )
    cap = disc_height(grid, 300e3, 1.0).values
    bed_ptr = bmi.get_value_ptr("bedrock_surface__elevation")
    for k, level in enumerate((0.0, -20.0, -40.0)):
        ice = 1800.0 * (k + 1) / 3 * cap
        bmi.set_value("glacier_ice__thickness", ice.ravel())
        bmi.set_value("sea_water_surface__elevation", np.full(24 * 24, level))
        bmi.update()
        expected = stepper.advance(200.0, ice, level)
        assert np.array_equal(bed_ptr.reshape(24, 24), expected.values)  # pointer still live
        rate = bmi.get_value("bedrock_surface__time_derivative_of_elevation", np.empty(576))
        assert np.array_equal(rate, stepper.uplift_rate().values.ravel())
    assert bmi.get_current_time() == 600.0
    # update_until: steps of [time] step, the last one shorter
    bmi.update_until(1050.0)
    stepper.advance(200.0, ice, -40.0)
    stepper.advance(200.0, ice, -40.0)
    stepper.advance(50.0, ice, -40.0)
    w = bmi.get_value("lithosphere__downward_deflection", np.empty(576))
    assert np.array_equal(w, stepper.deflection.values.ravel())
    assert bmi.get_current_time() == pytest.approx(1050.0, abs=1e-9)
    assert w.max() > 10.0  # the cap has pushed the bed down
    at = np.array([0, 300])
    assert np.array_equal(
        bmi.get_value_at_indices("lithosphere__downward_deflection", np.empty(2), at), w[at]
    )
    shape = bmi.get_grid_shape(0, np.empty(2, dtype=np.int64))
    origin = bmi.get_grid_origin(0, np.empty(2))
    assert shape.tolist() == [24, 24] and origin.tolist() == [-460e3, -460e3]
    bmi.finalize()


def test_bmi_with_an_elastic_earth_equals_an_ice_stepper(tmp_path):
    # [mantle] elastic = true reaches the IceStepper behind the component (same numbers
    # bit for bit), and the elastic part moves the bed.
    text = _small_config(tmp_path).read_text()
    text = text.replace('edges = "periodic"', 'edges = "infinite"')
    text = text.replace('relaxation_time = "3 kyr"', 'relaxation_time = "3 kyr"\nelastic = true')
    (tmp_path / "elastic.toml").write_text(text)
    bmi = FlexureBmi()
    bmi.initialize(str(tmp_path / "elastic.toml"))
    grid = empty_grid(24, 24, 40e3)
    plate = Plate(te=50e3, infill_density=0.0)
    options = {"relaxation_time": 3000.0, "edges": "infinite"}
    stepper = IceStepper(grid - 100.0, plate, "relaxing", elastic=True, **options)
    rigid = IceStepper(grid - 100.0, plate, "relaxing", **options)
    ice = 1500.0 * disc_height(grid, 300e3, 1.0).values
    for _ in range(2):
        bmi.set_value("glacier_ice__thickness", ice.ravel())
        bmi.update()
        expected = stepper.advance(200.0, ice, 0.0).values
        rigid.advance(200.0, ice, 0.0)
    bed = bmi.get_value("bedrock_surface__elevation", np.empty(576))
    assert np.array_equal(bed, expected.ravel())
    assert np.abs(expected - rigid.bed_elevation.values).max() > 1.0
    bmi.finalize()


def test_bmi_refuses_what_it_cannot_use(tmp_path):
    bmi = FlexureBmi()
    with pytest.raises(InputError, match="nowhere.toml: scenario file not found"):
        bmi.initialize(str(tmp_path / "nowhere.toml"))
    text = _small_config(tmp_path).read_text()
    (tmp_path / "extra.toml").write_text(text.replace("[mantle]", "[mantle]\nfriction = 2"))
    with pytest.raises(InputError, match=r"extra.toml: \[mantle\].*friction"):
        bmi.initialize(str(tmp_path / "extra.toml"))
    bad = text.replace('end = "2 kyr"', 'end = "50 yr"')
    (tmp_path / "short.toml").write_text(bad)
    with pytest.raises(InputError, match=r"\[time\] end: 50 years is shorter than one step"):
        bmi.initialize(str(tmp_path / "short.toml"))
    bmi.initialize(str(_small_config(tmp_path)))
    with pytest.raises(InputError, match="'bedrock_surface__elevation' cannot be set"):
        bmi.set_value("bedrock_surface__elevation", np.zeros(576))
    bmi.set_value("glacier_ice__thickness", np.full(576, -1.0))
    with pytest.raises(InputError, match="ice_thickness must be finite and >= 0"):
        bmi.update()
