"""``gridflex sweep`` (gridflex.workflows.sweep): real runs, real files, exit codes."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import Plate, solve
from gridflex.cli.main import main
from tests.helpers import BASE, run_cli, write_seamount_inputs


def test_sweep_writes_one_netcdf(tmp_path):
    load = write_seamount_inputs(tmp_path)
    (tmp_path / "s.toml").write_text(
        BASE
        + """
[output]
file = "sweep.nc"

[sweep]
te = ["5 km", "12 km", "30 km"]
infill_density = [0, 1030]
"""
    )
    done = run_cli("sweep", "s.toml", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert "6/6" in done.stderr  # progress shown on stderr
    with xr.open_dataset(tmp_path / "sweep.nc") as ds:
        assert ds["deflection"].dims == ("te", "infill_density", "y", "x")
        assert_allclose(ds["te"], [5e3, 12e3, 30e3])
        single = solve(load, Plate(te=12e3, infill_density=0.0))["deflection"]
        # the sweep is the same solve as a single run (common practice: identical code path)
        assert_allclose(
            ds["deflection"].sel(te=12e3, infill_density=0.0).values, single.values, rtol=1e-10
        )


@pytest.mark.parametrize(
    ("table", "match"),
    [
        ("te = []", "list of values is empty"),
        ('te = ["5 parsecs"]', "unit 'parsecs'"),
        ('scheduler = "threads"', "lists no values"),
        ("density = [1]", "unknown key 'density'"),
    ],
)
def test_sweep_bad_tables(tmp_path, capsys, table, match):
    write_seamount_inputs(tmp_path)
    (tmp_path / "s.toml").write_text(BASE + f'\n[output]\nfile = "o.nc"\n\n[sweep]\n{table}\n')
    assert main(["sweep", str(tmp_path / "s.toml")]) == 2
    assert match in capsys.readouterr().err


def test_sweep_load_density_is_linear(tmp_path):
    load = write_seamount_inputs(tmp_path)
    (tmp_path / "s.toml").write_text(
        BASE
        + """
[output]
file = "sweep.nc"

[sweep]
load_density = ["2.4 g/cm^3", 2800]
te = ["12 km"]
"""
    )
    assert main(["sweep", "-q", str(tmp_path / "s.toml")]) == 0
    with xr.open_dataset(tmp_path / "sweep.nc") as ds:
        assert ds["deflection"].dims == ("load_density", "te", "y", "x")
        assert_allclose(ds["load_density"], [2400.0, 2800.0])
        w = ds["deflection"].sel(te=12e3)
        # linear plate: w scales with the load contrast rho_l - rho_w (Turcotte & Schubert
        # 2002, ch. 3); 1770 / 1370 for 2800 vs 2400 in water
        assert_allclose(
            w.sel(load_density=2800.0)
            / w.sel(load_density=2400.0).where(np.abs(w.sel(load_density=2400.0)) > 1e-6),
            1770.0 / 1370.0,
            rtol=1e-9,
        )
        single = solve(load, Plate(te=12e3))["deflection"]
        assert_allclose(w.sel(load_density=2800.0).values, single.values, rtol=1e-10)
