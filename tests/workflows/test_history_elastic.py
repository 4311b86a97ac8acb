"""``[mantle] elastic = true`` in a history scenario, through a real NetCDF file."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import InputError, Plate, ice_response
from gridflex.synthetic import disc_height, empty_grid
from gridflex.workflows.history import load_history_scenario, run_history_scenario

SCENARIO = """
[plate]
elastic_thickness = "60 km"

[mantle]
model = "half-space"
elastic = true
elastic_youngs_modulus = "120 GPa"
elastic_poisson_ratio = 0.3

[grid]
rows = 24
columns = 24
spacing = "50 km"

[ice]
synthetic = "disc"
radius = "300 km"
height = "1500 m"
times = [0, 1000, 2000]
thickness_factors = [0.0, 1.0, 0.5]

[bed]
elevation = "200 m"

[output]
file = "out/ice.nc"
"""


def test_elastic_earth_is_written_and_equals_the_library_call(tmp_path):
    # The command adds nothing numerical (common practice): the written deflection and
    # elastic_deflection are ice_response(..., elastic=True) with the scenario's moduli.
    path = tmp_path / "history.toml"
    path.write_text(SCENARIO)
    run_history_scenario(load_history_scenario(path))
    grid = empty_grid(24, 24, 50e3)
    disc = disc_height(grid, 300e3, 1500.0)
    ice = xr.DataArray(
        np.array([0.0, 1.0, 0.5])[:, None, None] * disc.values[None],
        dims=("time", "y", "x"),
        coords={"time": [0.0, 1000.0, 2000.0], "y": grid.y, "x": grid.x},
    )
    expected = ice_response(
        ice,
        xr.full_like(grid, 200.0),
        Plate(te=60e3, infill_density=0.0),
        elastic=True,
        elastic_youngs_modulus=120e9,
        elastic_poisson_ratio=0.3,
    )
    with xr.open_dataset(tmp_path / "out" / "ice.nc", decode_times=False) as written:
        assert written["elastic_deflection"].attrs["units"] == "m"
        for name in ("deflection", "elastic_deflection", "uplift_rate"):
            assert_allclose(written[name].values, expected[name].values, rtol=0, atol=1e-9)
        assert written.attrs["elastic_earth"] == "half-space (Boussinesq)"
    assert np.abs(expected["elastic_deflection"].values[1]).max() > 0.1


@pytest.mark.parametrize(
    ("old", "new", "match"),
    [
        ('"120 GPa"', '"0 GPa"', "elastic_youngs_modulus"),
        ("elastic_poisson_ratio = 0.3", "elastic_poisson_ratio = 0.7", "elastic_poisson_ratio"),
        ("elastic = true", 'elastic = "yes"', "elastic"),
    ],
)
def test_bad_elastic_keys_name_the_key(tmp_path, old, new, match):
    path = tmp_path / "history.toml"
    path.write_text(SCENARIO.replace(old, new))
    with pytest.raises(InputError, match=match):
        load_history_scenario(path)
