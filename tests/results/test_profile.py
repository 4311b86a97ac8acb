"""Profiles along a line: sampling, CSV and plot, from Python and the command line."""

from __future__ import annotations

import csv

import numpy as np
import pytest
import xarray as xr

from gridflex import InputError, Plate, solve
from gridflex.cli.main import main
from gridflex.io.netcdf import write_netcdf
from gridflex.results.profile import sample_profile
from tests.helpers import make_grid


@pytest.fixture
def result() -> xr.Dataset:
    grid = make_grid(64, 80, 2e3)
    load = grid.copy(data=1e7 * np.exp(-(grid.y**2 + grid.x**2).values / (2 * 6e3**2)))
    return solve(load, Plate(te=8e3))


def test_profile_follows_the_grid(result):
    # along a grid row the bilinear samples at the nodes equal the grid values
    row = result.isel(y=32)
    y0 = float(row.y)
    profile = sample_profile(
        result, (float(result.x[0]), y0), (float(result.x[-1]), y0), samples=80
    )
    np.testing.assert_allclose(
        profile["deflection"].values, row["deflection"].values, rtol=1e-10, atol=1e-12
    )
    np.testing.assert_allclose(
        profile["distance"].values, row.x.values - row.x.values[0], rtol=1e-12
    )


def test_profile_outside_the_grid(result):
    with pytest.raises(InputError, match="profile end .* lies outside the grid"):
        sample_profile(result, (0.0, 0.0), (1e7, 0.0))


def test_profile_command_writes_csv_and_plot(tmp_path, result):
    write_netcdf(result, tmp_path / "r.nc")
    code = main(
        [
            "profile",
            str(tmp_path / "r.nc"),
            "--start",
            "-50000",
            "0",
            "--end",
            "50000",
            "0",
            "--csv",
            str(tmp_path / "p.csv"),
            "--plot",
            str(tmp_path / "p.png"),
            "-q",
        ]
    )
    assert code == 0
    with open(tmp_path / "p.csv") as handle:
        rows = list(csv.reader(handle))
    assert rows[0][:4] == ["distance [m]", "x [m]", "y [m]", "deflection [m]"]
    values = np.array(rows[1:], dtype=float)
    centre = np.argmin(np.abs(values[:, 1]))
    assert values[centre, 3] == pytest.approx(float(result.deflection.sel(x=0, y=0)), rel=1e-6)
    assert (tmp_path / "p.png").read_bytes()[:4] == b"\x89PNG"
    # outputs are not overwritten silently
    assert (
        main(
            [
                "profile",
                str(tmp_path / "r.nc"),
                "--start",
                "0",
                "0",
                "--end",
                "1",
                "1",
                "--csv",
                str(tmp_path / "p.csv"),
                "-q",
            ]
        )
        == 2
    )


def _stepped(result: xr.Dataset) -> xr.Dataset:
    """The result at three invented steps (a history-like output): 0.5, 1 and 2 times it."""
    factors = xr.DataArray([0.5, 1.0, 2.0], dims="time")
    out = xr.Dataset({"deflection": (result["deflection"] * factors).transpose("time", "y", "x")})
    return out.assign_coords(time_years=("time", [-2000.0, -1000.0, 0.0]))


def test_profile_of_a_result_with_steps_has_a_column_per_step_or_one_step(tmp_path, result):
    # linearity: the profile of a scaled grid is the scaled profile (common practice)
    write_netcdf(_stepped(result), tmp_path / "steps.nc")
    line = ["--start", "-50000", "0", "--end", "50000", "0"]
    assert (
        main(["profile", str(tmp_path / "steps.nc"), *line, "--csv", str(tmp_path / "a.csv"), "-q"])
        == 0
    )
    with open(tmp_path / "a.csv") as handle:
        rows = list(csv.reader(handle))
    assert rows[0][3:] == [
        "deflection[time=-2000] [m]",
        "deflection[time=-1000] [m]",
        "deflection[time=0] [m]",
    ]
    values = np.array(rows[1:], dtype=float)
    np.testing.assert_allclose(values[:, 3] * 2.0, values[:, 4], rtol=1e-8)  # CSV digits
    np.testing.assert_allclose(values[:, 4] * 2.0, values[:, 5], rtol=1e-8)
    assert (
        main(
            [
                "profile",
                str(tmp_path / "steps.nc"),
                *line,
                "--at",
                "-900",
                "--csv",
                str(tmp_path / "b.csv"),
                "-q",
            ]
        )
        == 0
    )
    with open(tmp_path / "b.csv") as handle:
        one = np.array(list(csv.reader(handle))[1:], dtype=float)
    np.testing.assert_allclose(one[:, 3], values[:, 4], rtol=1e-12)  # the step at -1000 yr
    code = main(
        [
            "profile",
            str(tmp_path / "steps.nc"),
            *line,
            "--csv",
            str(tmp_path / "c.csv"),
            "--plot",
            str(tmp_path / "c.png"),
        ]
    )
    assert code == 2 and not (tmp_path / "c.csv").exists()  # all or nothing


def test_profile_ends_wrap_longitudes_into_the_grid_convention():
    # a grid in 0-360 degrees east, ends given as -170 (= 190 E): the same line (common practice)
    lon = np.arange(180.0, 200.0, 0.5)
    lat = np.arange(-10.0, 10.0, 0.5)
    field = xr.DataArray(
        np.add.outer(lat, lon), dims=("y", "x"), coords={"y": lat, "x": lon}, name="value"
    )
    ds = xr.Dataset({"value": field})
    ds["x"].attrs["units"] = "degrees_east"
    wrapped = sample_profile(ds, (-175.0, 0.0), (-165.0, 0.0), samples=5)
    plain = sample_profile(ds, (185.0, 0.0), (195.0, 0.0), samples=5)
    np.testing.assert_allclose(wrapped["value"].values, plain["value"].values, rtol=1e-12)
