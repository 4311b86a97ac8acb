"""``gridflex history`` on a plate whose te is a grid: a te file, a margin, breaks."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import InputError, Plate, ice_response
from gridflex.cli.main import main
from gridflex.synthetic import disc_height, empty_grid
from gridflex.te_maps import break_mask, broken_te, margin_te
from gridflex.workflows.history import load_history_scenario, run_history_scenario

SCENARIO = """
[ice]
file = "ice.nc"
variable = "thk"
[bed]
file = "bed.nc"
variable = "topg"
[mantle]
model = "{model}"
[output]
file = "res.nc"
"""

MARGIN = """
[plate]
infill_density = 0
[margin]
te_left = "10 km"
te_right = "60 km"
line = [[0, -1000000], [0, 1000000]]
width = "100 km"
"""


def _files(folder: Path) -> tuple[xr.DataArray, xr.DataArray]:
    """Ice (time, y, x) and bed NetCDF files on one metric grid of 24 x 24 cells of 25 km:
    an ice cap growing over 2 kyr and half melting by 4 kyr, on land 300 m up."""
    grid = empty_grid(24, 24, 25e3)
    disc = disc_height(grid, 150e3, 2000.0, cx=-50e3).values
    ice = xr.DataArray(
        np.stack([0.0 * disc, disc, 0.5 * disc]),
        dims=("time", "y", "x"),
        coords={"time": [0.0, 2000.0, 4000.0], "y": grid.y.values, "x": grid.x.values},
    )
    xr.Dataset(
        {"thk": (("time", "y", "x"), ice.values, {"units": "m"})},
        coords={"time": ("time", ice.time.values, {"units": "yr"}), "y": grid.y, "x": grid.x},
    ).to_netcdf(folder / "ice.nc")
    bed = xr.full_like(grid, 300.0)
    xr.Dataset({"topg": (("y", "x"), bed.values, {"units": "m"})}, coords=grid.coords).to_netcdf(
        folder / "bed.nc"
    )
    return ice, bed


def _run(folder: Path, text: str) -> xr.Dataset:
    path = folder / "history.toml"
    path.write_text(text)
    return run_history_scenario(load_history_scenario(path), overwrite=True).result


@pytest.mark.parametrize("model", ["half-space", "relaxing"])
def test_margin_and_break_run_through_the_history_command(tmp_path, model):
    # The [margin] and [[breaks]] tables of gridflex run give the te grid of a history
    # scenario on the ice grid: the command's result is ice_response on that grid (one
    # engine; common practice: identical numbers).
    ice, bed = _files(tmp_path)
    text = SCENARIO.format(model=model) + MARGIN
    text += '[[breaks]]\nline = [[100000, -1000000], [100000, 1000000]]\nwidth = "30 km"\n'
    out = _run(tmp_path, text)
    like = bed
    te = margin_te(like, 10e3, 60e3, [(0, -1e6), (0, 1e6)], 100e3)
    te = broken_te(te, break_mask(like, [[(100e3, -1e6), (100e3, 1e6)]], 30e3))
    direct = ice_response(ice, bed, Plate(te=te, infill_density=0.0), model=model)
    w = out["deflection"].values
    assert_allclose(w, direct.deflection.values, rtol=0, atol=1e-9 * np.abs(w).max())
    assert out.attrs["plate_te"] == "grid"
    assert out.attrs["solver"] == "finite-difference"
    # the te grid matters: a constant te of either side gives another answer
    for value in (10e3, 60e3):
        other = ice_response(ice, bed, Plate(te=value, infill_density=0.0), model=model)
        assert np.abs(other.deflection.values - w).max() > 0.01 * np.abs(w).max()
    # and the written file holds it
    written = xr.open_dataset(tmp_path / "res.nc", decode_times=False)
    try:
        assert_allclose(written["deflection"].values, w, rtol=1e-6, atol=1e-6)
    finally:
        written.close()


def test_te_file_through_the_command_line(tmp_path):
    # A te NetCDF on the ice grid (elastic_thickness_file), read through the one front door
    # of grid inputs, gives the same result as the te grid passed to ice_response.
    ice, bed = _files(tmp_path)
    te = (30e3 + 20e3 * (bed.x / 300e3) + 0.0 * bed).transpose("y", "x")
    xr.Dataset({"te": (("y", "x"), te.values / 1e3, {"units": "km"})}, coords=bed.coords).to_netcdf(
        tmp_path / "te.nc"
    )
    plate = '[plate]\ninfill_density = 0\nelastic_thickness_file = "te.nc"\n'
    plate += 'elastic_thickness_variable = "te"\n'
    path = tmp_path / "history.toml"
    path.write_text(SCENARIO.format(model="relaxing") + plate)
    assert main(["history", str(path)]) == 0
    with xr.open_dataset(tmp_path / "res.nc", decode_times=False) as written:
        w = written["deflection"].values
    direct = ice_response(ice, bed, Plate(te=te, infill_density=0.0), model="relaxing")
    assert_allclose(w, direct.deflection.values, rtol=1e-6, atol=1e-6)  # float32 output


def test_te_sources_are_checked_like_gridflex_run(tmp_path):
    _files(tmp_path)
    both = SCENARIO.format(model="relaxing") + MARGIN.replace(
        "infill_density = 0", 'infill_density = 0\nelastic_thickness = "30 km"'
    )
    with pytest.raises(InputError, match=r"\[plate\] elastic_thickness: give only one of"):
        _run(tmp_path, both)
    broken = SCENARIO.format(model="relaxing") + MARGIN + "[[breaks]]\nwidth = 0\n"
    with pytest.raises(InputError, match=r"\[\[breaks\]\] #1: give either 'line' or 'file'"):
        _run(tmp_path, broken)
    # a te file on another grid is refused, naming the key and the file
    small = empty_grid(10, 10, 25e3)
    xr.Dataset(
        {"te": (("y", "x"), np.full((10, 10), 30.0), {"units": "km"})}, coords=small.coords
    ).to_netcdf(tmp_path / "te.nc")
    plate = '[plate]\ninfill_density = 0\nelastic_thickness_file = "te.nc"\n'
    plate += 'elastic_thickness_variable = "te"\n'
    with pytest.raises(InputError, match=r"\[plate\] elastic_thickness_file: te\.nc"):
        _run(tmp_path, SCENARIO.format(model="relaxing") + plate)
