"""Refused inputs: one line on stderr naming the culprit, exit status 2, no file written.

Each case used to end in a traceback, a run without end, a misleading message or a
silently wrong file (issue 16); the API cases raise :class:`InputError`.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from rasterio.crs import CRS

from gridflex import InputError, Plate, solve
from gridflex.cli.main import main
from gridflex.estimation.misfit import fit_te
from gridflex.gis.geometry import from_lonlat, to_lonlat
from gridflex.glacial.ice import ice_response
from gridflex.results.profile import sample_profile
from gridflex.sweeps.parameter_sweep import sweep
from gridflex.validation import check_integer, check_number, check_path_text
from tests.helpers import make_grid, write_time_grid

RUN = """
[plate]
elastic_thickness = "10 km"

[grid]
rows = 32
columns = 32
spacing = "5 km"

[[loads]]
synthetic = "gaussian"
kind = "thickness"
density = 2800
height = "2 km"
radius = "20 km"

[output]
file = "out.nc"
"""

HISTORY = """
[plate]
elastic_thickness = "80 km"

[mantle]
model = "half-space"
viscosity = "1e21 Pa s"

[grid]
rows = 16
columns = 16
spacing = "40 km"

[ice]
synthetic = "disc"
radius = "200 km"
height = "2000 m"
times = [-20000, -15000, -10000, -5000, 0]
thickness_factors = [0.0, 1.0, 1.0, 0.2, 0.0]

[bed]
elevation = "300 m"

[output]
file = "ice.nc"
"""

BASIN = """
[plate]
elastic_thickness = "8 km"

[basin]
surface_file = "surface.nc"
surface_variable = "elevation"

[[stages]]
file = "s1.nc"
variable = "thickness"
age = 3.0e6
grain_density = 1000

[output]
file = "basin.nc"
"""


def _replace(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


def _write_result(folder: Path) -> None:
    """A small result grid for ``gridflex profile``."""
    grid = make_grid(8, 8, 1e3)
    grid.attrs["units"] = "m"
    xr.Dataset({"deflection": grid}).to_netcdf(folder / "result.nc")


def _write_ice_with_inf(folder: Path) -> None:
    values = np.zeros((2, 3, 4))
    values[1, 1, 1] = np.inf
    write_time_grid(folder / "ice_inf.nc", "ice", [0.0, 1.0], values, time_attrs={"units": "years"})


def _write_past_the_pole(folder: Path) -> None:
    """A longitude/latitude load whose cell centres run from 60 to 96 degrees north."""
    lat = np.arange(60.0, 97.0, 4.0)
    lon = np.arange(0.0, 40.0, 4.0)
    height = xr.DataArray(np.ones((lat.size, lon.size)), dims=("lat", "lon"))
    ds = xr.Dataset({"height": height.assign_attrs(units="m")}, coords={"lat": lat, "lon": lon})
    ds["lat"].attrs["units"] = "degrees_north"
    ds["lon"].attrs["units"] = "degrees_east"
    ds.to_netcdf(folder / "polar.nc")


def _write_load_with_inf(folder: Path) -> None:
    grid = make_grid(16, 16, 2e3)
    grid[3, 4] = np.inf
    ds = xr.Dataset({"height": grid.assign_attrs(units="m")})
    for axis in ("x", "y"):
        ds[axis].attrs["units"] = "m"
    ds.to_netcdf(folder / "inf.nc")


FILE_LOAD = """
[plate]
elastic_thickness = "10 km"

[[loads]]
file = "LOAD"
variable = "height"
density = 2800

[output]
file = "out.nc"
"""

CASES: dict[str, tuple[str, str, list[str], str]] = {
    # name: (command, scenario text, extra arguments, text the one line must hold)
    "grid of 10^6 squared": (
        "run",
        _replace(RUN, "rows = 32\ncolumns = 32", "rows = 1000000\ncolumns = 1000000"),
        [],
        "use fewer [grid] rows and columns",
    ),
    "working grid spacing too fine": (
        "run",
        RUN + '\n[working_grid]\nspacing = "1 m"\n',
        [],
        "use a coarser [working_grid] spacing",
    ),
    "observation height 1e8 m": (
        "run",
        RUN + '\n[infill]\nbase_elevation = "-4000 m"\n[gravity]\nobservation_height = "1e8 m"\n',
        [],
        "lower observation_height",
    ),
    "te 1e200 m": (
        "run",
        _replace(RUN, '"10 km"', '"1e200 m"'),
        [],
        "[plate] elastic_thickness must be at most 1e+06 m, got '1e200 m'",
    ),
    "spacing 0": ("run", _replace(RUN, '"5 km"', "0"), [], "[grid] spacing must be > 0, got 0"),
    "boolean profile end": (
        "run",
        _replace(
            RUN,
            'file = "out.nc"',
            'file = "out.nc"\nprofile_start = [true, false]\nprofile_end = [1, 2]\n'
            'profile_csv = "p.csv"',
        ),
        [],
        "[output] profile_start x must be a finite number, got True",
    ),
    "profile of zero length": (
        "run",
        _replace(
            RUN,
            'file = "out.nc"',
            'file = "out.nc"\nprofile_start = [0, 0]\nprofile_end = [0, 0]\nprofile_csv = "p.csv"',
        ),
        [],
        "are the same point",
    ),
    "grid past the pole": (
        "run",
        _replace(RUN, 'spacing = "5 km"', 'spacing = "5 km"\ncrs = "EPSG:4326"\ncenter_y = 89.9'),
        [],
        "[grid]: the grid spans latitudes 89.1838 to 90.6162, beyond a pole",
    ),
    "200 km geographic cells": (
        "run",
        _replace(
            _replace(RUN, "rows = 32\ncolumns = 32", "rows = 64\ncolumns = 64"),
            'spacing = "5 km"',
            'spacing = "200 km"\ncrs = "EPSG:4326"\ncenter_y = 60',
        ),
        [],
        "beyond a pole",
    ),
    "NUL in an output path": (
        "run",
        _replace(RUN, 'file = "out.nc"', 'file = "out\\u0000.nc"'),
        [],
        "[output] file must be a file path without NUL characters",
    ),
    "a folder as a load": (
        "run",
        _replace(FILE_LOAD, "LOAD", "folder"),
        [],
        "folder: is a folder, not a file",
    ),
    "infinite load cells": (
        "run",
        _replace(FILE_LOAD, "LOAD", "inf.nc"),
        [],
        "inf.nc: 'height' has 1 cell(s) holding inf, which looks like a fill value",
    ),
    "a raster past the pole": (
        "run",
        _replace(FILE_LOAD, "LOAD", "polar.nc"),
        [],
        "polar.nc: 'height': the grid spans latitudes 58 to 98, beyond a pole",
    ),
    "history of 10^5 squared": (
        "history",
        _replace(HISTORY, "rows = 16\ncolumns = 16", "rows = 100000\ncolumns = 100000"),
        [],
        "use fewer [grid] rows and columns (a coarser spacing) or fewer [ice] times",
    ),
    "infinite ice cells": (
        "history",
        _replace(
            _replace(HISTORY, 'synthetic = "disc"', 'file = "ice_inf.nc"\nvariable = "ice"'),
            'radius = "200 km"\nheight = "2000 m"\ntimes = [-20000, -15000, -10000, -5000, 0]\n'
            "thickness_factors = [0.0, 1.0, 1.0, 0.2, 0.0]\n",
            "",
        ),
        [],
        "ice_inf.nc: variable 'ice' has 1 cell(s) holding inf",
    ),
    "history spacing 1e-200 m": (
        "history",
        _replace(HISTORY, '"40 km"', '"1e-200 m"'),
        [],
        "needs more memory than exists",
    ),
    "time_reference yesterday": (
        "history",
        HISTORY + 'time_reference = "yesterday"\n',
        [],
        "[output] time_reference must be a date written YYYY-MM-DD",
    ),
    "max_step 1e-6 yr": (
        "history",
        _replace(HISTORY, "[grid]", '[solver]\nmax_step = "1e-6 yr"\n\n[grid]'),
        [],
        "[solver] max_step = 1e-06 years splits the history of 20000 years into 2e+10 steps",
    ),
    "decreasing times": (
        "history",
        _replace(
            HISTORY, "[-20000, -15000, -10000, -5000, 0]", "[0, -5000, -10000, -15000, -20000]"
        ),
        [],
        "[ice] times: must increase",
    ),
    "sweep of 400^3 members": (
        "sweep",
        RUN
        + "\n[sweep]\nte = [{}]\nyoungs_modulus = [{}]\nmantle_density = [{}]\n".format(
            *(", ".join(str(base + i) for i in range(400)) for base in (1000, 1e10, 3000))
        ),
        [],
        "sweep of 64000000 members (400 x 400 x 400) needs about",
    ),
    "scheduler banana": (
        "sweep",
        RUN + '\n[sweep]\nte = ["5 km", "10 km"]\n',
        ["--scheduler", "banana"],
        "--scheduler must be one of 'threads', 'processes', 'synchronous', a dask scheduler",
    ),
    "grains lighter than water": (
        "basin",
        BASIN,
        [],
        "[[stages]] #1 grain_density: grain_density (1000 kg/m^3) must exceed the water density",
    ),
    "profile samples 1e9": (
        "profile",
        "",
        ["result.nc", "--start", "0", "0", "--end", "2000", "0", "--csv", "p.csv"]
        + ["--samples", "1000000000"],
        "ask for fewer samples",
    ),
    "NUL in the scenario path": (
        "run",
        "",
        ["s\0.toml"],
        "scenario file must be a file path without NUL characters",
    ),
    "NUL in a profile path": (
        "profile",
        "",
        ["result.nc", "--start", "0", "0", "--end", "2000", "0", "--csv", "p\0.csv"],
        "--csv must be a file path without NUL characters",
    ),
}


@pytest.mark.parametrize("case", list(CASES), ids=list(CASES))
def test_refused_with_one_line_and_no_file(case, tmp_path, capsys, monkeypatch):
    command, text, extra, expected = CASES[case]
    monkeypatch.chdir(tmp_path)
    (tmp_path / "folder").mkdir()
    _write_load_with_inf(tmp_path)
    _write_ice_with_inf(tmp_path)
    _write_past_the_pole(tmp_path)
    _write_result(tmp_path)
    args = [command, *extra]
    if text:
        (tmp_path / "s.toml").write_text(text)
        args = [command, "s.toml", *extra]
    before = sorted(p.name for p in tmp_path.rglob("*"))
    assert main([*args, "-q"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("gridflex: error: "), err
    assert expected in err, err
    assert sorted(p.name for p in tmp_path.rglob("*")) == before  # nothing written


def _load() -> xr.DataArray:
    grid = make_grid(16, 16, 5e3)
    grid[8, 8] = 1e7
    return grid


POLAR = CRS.from_proj4("+proj=laea +lat_0=89.9 +lon_0=0 +datum=WGS84 +units=m")

API: dict[str, tuple[Callable[[], object], str]] = {
    "max_iterations 2.5": (
        lambda: solve(_load(), Plate(te=1e4), method="finite-difference", max_iterations=2.5),
        "max_iterations must be a whole number >= 1, got 2.5",
    ),
    "complex load": (
        lambda: solve(_load().astype(complex), Plate(te=1e4)),
        "load must hold real numbers, got dtype complex128",
    ),
    "complex te grid": (
        lambda: Plate(te=make_grid(16, 16, 5e3).astype(complex) + 1e4),
        "te grid must hold real numbers, got dtype complex128",
    ),
    "in-plane force as a string": (
        lambda: solve(_load(), Plate(te=1e4), inplane_force_x="1e9"),
        "inplane_force_x must be a finite number (N/m, tension positive), got '1e9'",
    ),
    "pad_factor 1e300": (
        lambda: solve(_load(), Plate(te=1e4), pad_factor=1e300),
        "with a margin of 3.555e+304 m needs more memory than exists",
    ),
    "te 1e200 m": (lambda: Plate(te=1e200), "te must be a finite number >= 0 and <= 1e+06"),
    "rigidity overflow": (
        lambda: Plate(te=1e4, youngs_modulus=1e300),
        "gives a rigidity beyond the floating-point range",
    ),
    "infinite observation": (
        lambda: fit_te(_load().where(_load() == 0, np.inf), _load(), Plate(te=1e4)),
        "observed has 1 infinite value(s)",
    ),
    "zero-length profile": (
        lambda: sample_profile(xr.Dataset({"w": _load()}), (0.0, 0.0), (0.0, 0.0)),
        "profile start and profile end are the same point",
    ),
    "boolean profile end": (
        lambda: sample_profile(xr.Dataset({"w": _load()}), (True, False), (0.0, 5e3)),
        "profile start x must be a finite number, got True",
    ),
    "max_step splitting into too many steps": (
        lambda: ice_response(
            xr.concat([_load() * 0.0 + 100.0] * 2, dim="time").assign_coords(time=[0.0, 1e3]),
            _load() * 0.0,
            Plate(te=1e4, infill_density=0.0),
            max_step=1e-6,
        ),
        "max_step = 1e-06 years splits the history of 1000 years into 1e+09 steps",
    ),
    "scheduler banana": (
        lambda: sweep(_load(), Plate(te=1e4), {"te": [1e4, 2e4]}, scheduler="banana"),
        "scheduler must be one of",
    ),
    "PROJ error at a pole": (
        lambda: from_lonlat([0.0], [95.0], POLAR),
        "projecting longitude/latitude: the coordinates cannot be transformed (PROJ",
    ),
    "PROJ error outside the projection": (
        lambda: to_lonlat([1e9], [1e9], POLAR),
        "longitude/latitude of the grid: the coordinates cannot be transformed",
    ),
    "integer 2.5": (lambda: check_integer("n", 2.5), "n must be a whole number, got 2.5"),
    "number as a string": (
        lambda: check_number("x", "1e9"),
        "x must be a finite number, got '1e9'",
    ),
    "complex number": (lambda: check_number("x", 1 + 2j), "x must be a finite number, got (1+2j)"),
    "NUL in a path": (
        lambda: check_path_text("path", "a\0b"),
        "path must be a file path without NUL characters",
    ),
}


@pytest.mark.parametrize("case", list(API), ids=list(API))
def test_api_raises_input_error(case):
    call, expected = API[case]
    with pytest.raises(InputError) as caught:
        call()
    assert expected in str(caught.value)
    assert "\n" not in str(caught.value)
