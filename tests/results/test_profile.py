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
