"""The command line: real runs, real files, exit codes and one-line errors."""

from __future__ import annotations

from pathlib import Path

import netCDF4
import numpy as np
import pytest
import xarray as xr

from gridflex import Plate, solve
from gridflex.cli.main import main
from tests.helpers import make_grid, run_cli


def _write_load(path: Path) -> xr.DataArray:
    grid = make_grid(96, 80, 2.5e3)
    height = grid.copy(data=3000.0 * np.exp(-(grid.y**2 + grid.x**2).values / (2 * 15e3**2)))
    ds = xr.Dataset({"height": height.assign_attrs(units="m")})
    ds["x"].attrs["units"] = "m"
    ds["y"].attrs["units"] = "km"
    ds = ds.assign_coords(y=ds.y / 1e3)  # store y in km to exercise unit conversion
    ds.to_netcdf(path)
    return height


SCENARIO = """
[plate]
elastic_thickness = "12 km"
infill_density = 1030

[[loads]]
name = "seamount"
file = "load.nc"
variable = "height"
density = 2800
displaced_density = 1030

[output]
file = "out/result.nc"
map = "out/map.png"
"""


def test_run_writes_netcdf_and_map(tmp_path):
    height = _write_load(tmp_path / "load.nc")
    (tmp_path / "s.toml").write_text(SCENARIO)
    done = run_cli("run", "s.toml", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert "forebulge height" in done.stdout
    expected = solve(height * (1770.0 * 9.81), Plate(te=12e3))["deflection"].values
    with xr.open_dataset(tmp_path / "out" / "result.nc") as ds:
        np.testing.assert_allclose(ds["deflection"].values, expected, rtol=1e-12)
        np.testing.assert_allclose(ds["vertical_displacement"].values, -expected, rtol=1e-12)
        assert ds["deflection"].attrs["units"] == "m"
        assert "elastic_thickness" in ds.attrs["scenario"]
    with netCDF4.Dataset(tmp_path / "out" / "result.nc") as nc:
        assert nc.variables["load"].units == "Pa"
    png = (tmp_path / "out" / "map.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    # a second run refuses to overwrite, then replaces with --overwrite
    again = run_cli("run", "s.toml", cwd=tmp_path)
    assert again.returncode == 2 and "output exists" in again.stderr
    assert run_cli("run", "s.toml", "--overwrite", "-q", cwd=tmp_path).returncode == 0
    assert not list((tmp_path / "out").glob("*.part"))


@pytest.mark.parametrize(
    ("scenario", "message"),
    [
        (None, "scenario file not found"),
        ("[plate\nelastic_thickness = 1", "malformed TOML"),
        (SCENARIO.replace("infill_density", "fill_density"), "unknown key 'fill_density'"),
        (SCENARIO.replace('"12 km"', '"12 furlongs"'), "unit 'furlongs' is not a length"),
        (SCENARIO.replace("load.nc", "missing.nc"), "missing.nc: file not found"),
        (
            SCENARIO.replace('variable = "height"', 'variable = "depth"'),
            "no variable 'depth'; variables are 'height'",
        ),
        (
            SCENARIO.replace('file = "out/result.nc"', 'file = "load.nc"'),
            "would overwrite an input file",
        ),
    ],
)
def test_cli_errors_are_one_line(tmp_path, scenario, message):
    _write_load(tmp_path / "load.nc")
    if scenario is not None:
        (tmp_path / "s.toml").write_text(scenario)
    done = run_cli("run", "s.toml", cwd=tmp_path)
    assert done.returncode == 2
    assert "Traceback" not in done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("gridflex: error:"), done.stderr
    assert message in lines[0]


def test_wrong_grid_unit_is_reported(tmp_path):
    _write_load(tmp_path / "load.nc")
    with xr.open_dataset(tmp_path / "load.nc") as ds:
        bad = ds.load()
    bad["height"].attrs["units"] = "kg"
    bad.to_netcdf(tmp_path / "bad.nc")
    (tmp_path / "s.toml").write_text(SCENARIO.replace("load.nc", "bad.nc"))
    done = run_cli("run", "s.toml", cwd=tmp_path)
    assert done.returncode == 2
    assert "bad.nc: variable 'height': unit 'kg' is not a length" in done.stderr


def test_demo_runs_in_process(tmp_path, capsys):
    assert main(["demo", "--out", str(tmp_path / "demo")]) == 0
    out = capsys.readouterr().out
    for word in ("maximum deflection", "moat depth", "forebulge height", "forebulge distance"):
        assert word in out
    with xr.open_dataset(tmp_path / "demo" / "island_chain.nc") as ds:
        w = ds["deflection"].values
        assert w.max() > 100.0 and w.min() < 0.0  # a moat and a bulge
    assert (tmp_path / "demo" / "island_chain_deflection.png").stat().st_size > 10_000
    with xr.open_dataset(tmp_path / "demo" / "island_chain.nc") as ds:
        # the moat is partly filled with sediment (to 300 m below the sea floor), and the
        # gravity maps are there: a free-air high over the edifices, a low over the moat
        assert 10.0 < float(ds["fill_sediment"].max()) < float(ds["moat_fill"].max())
        assert ds["moat_fill"].attrs["units"] == "m"
        fa = ds["free_air_anomaly"]
        assert float(fa.max()) > 100.0 and float(fa.min()) < -5.0
        assert np.isfinite(ds["bouguer_anomaly"].values).all()
    for name in ("moat_fill", "free_air", "bouguer"):
        assert (tmp_path / "demo" / f"island_chain_{name}.png").stat().st_size > 10_000
    assert main(["demo", "--out", str(tmp_path / "demo"), "-q"]) == 0  # reruns replace


def test_version_and_no_command(capsys):
    with pytest.raises(SystemExit) as info:
        main(["--version"])
    assert info.value.code == 0
    assert main([]) == 2
