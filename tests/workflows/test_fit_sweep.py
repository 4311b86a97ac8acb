"""``gridflex fit`` and ``gridflex sweep``: real runs, real files, exit codes."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import Plate, solve
from gridflex.cli.main import main
from tests.helpers import REPO_ROOT, make_grid, run_cli

TRUE_TE = 23.4e3


def _write_inputs(folder: Path) -> xr.DataArray:
    """Invented seamount height (m) and its noisy flexed sea floor, as NetCDF files."""
    grid = make_grid(64, 64, 6e3)
    r2 = (grid.y**2 + grid.x**2).values
    height = grid.copy(data=3000.0 * np.exp(-r2 / (2 * 15e3**2)))
    xr.Dataset({"height": height.assign_attrs(units="m")}).to_netcdf(folder / "load.nc")
    load = height * (1770.0 * 9.81)
    w = solve(load, Plate(te=TRUE_TE))["deflection"]
    rng = np.random.default_rng(3)
    floor = -4000.0 - w + 0.05 * float(w.max()) * rng.standard_normal(w.shape)
    floor = floor.where(r2 > (40e3) ** 2)  # the edifice itself is not a flexed surface
    xr.Dataset({"depth": floor.assign_attrs(units="m")}).to_netcdf(folder / "observed.nc")
    return load


BASE = """
[plate]
elastic_thickness = "10 km"      # not used by fit (te is searched)

[[loads]]
file = "load.nc"
variable = "height"
density = 2800
displaced_density = 1030
"""


def test_fit_writes_plot_summary_and_model(tmp_path):
    _write_inputs(tmp_path)
    (tmp_path / "s.toml").write_text(
        BASE
        + """
[output]
file = "out/best.nc"

[fit]
observed_file = "observed.nc"
observed_variable = "depth"
quantity = "surface"
te_min = "2 km"
te_max = "80 km"
"""
    )
    done = run_cli("fit", "s.toml", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert "te = " in done.stdout and "interval" in done.stdout
    summary = json.loads((tmp_path / "out" / "best_fit.json").read_text())
    # synthetic recovery (same forward model; issue requirement 5 %)
    assert_allclose(summary["te"], TRUE_TE, rtol=0.05)
    assert summary["te_low"] < TRUE_TE < summary["te_high"]
    assert_allclose(summary["offset"], -4000.0, atol=1.0)
    assert len(summary["misfit_curve"]["te"]) == len(summary["misfit_curve"]["rms_misfit"])
    assert (tmp_path / "out" / "best_misfit.png").stat().st_size > 1000
    with xr.open_dataset(tmp_path / "out" / "best.nc") as ds:
        assert {"deflection", "observed", "predicted", "residual"} <= set(ds.data_vars)
        assert_allclose(ds.attrs["plate_te"], summary["te"])
        assert "[fit]" in ds.attrs["scenario"]
    # outputs are not replaced without --overwrite
    again = run_cli("fit", "s.toml", cwd=tmp_path)
    assert again.returncode == 2 and "output exists" in again.stderr


def test_fit_needs_fit_table(tmp_path, capsys):
    _write_inputs(tmp_path)
    (tmp_path / "s.toml").write_text(BASE + '\n[output]\nfile = "o.nc"\n')
    assert main(["fit", str(tmp_path / "s.toml")]) == 2
    assert "needs a [fit] table" in capsys.readouterr().err


def test_fit_free_air_needs_depth(tmp_path, capsys):
    _write_inputs(tmp_path)
    (tmp_path / "s.toml").write_text(
        BASE
        + """
[output]
file = "o.nc"

[fit]
observed_file = "observed.nc"
observed_variable = "depth"
quantity = "free_air_anomaly"
"""
    )
    assert main(["fit", str(tmp_path / "s.toml")]) == 2
    assert "seafloor_depth: required" in capsys.readouterr().err


def test_sweep_writes_one_netcdf(tmp_path):
    load = _write_inputs(tmp_path)
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
    _write_inputs(tmp_path)
    (tmp_path / "s.toml").write_text(BASE + f'\n[output]\nfile = "o.nc"\n\n[sweep]\n{table}\n')
    assert main(["sweep", str(tmp_path / "s.toml")]) == 2
    assert match in capsys.readouterr().err


def test_sweep_load_density_is_linear(tmp_path):
    load = _write_inputs(tmp_path)
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


def test_estimate_te_example_runs(tmp_path):
    script = REPO_ROOT / "examples" / "estimate_te.py"
    done = subprocess.run(
        [sys.executable, str(script), str(tmp_path)], capture_output=True, text=True, timeout=300
    )
    assert done.returncode == 0, done.stderr
    assert "(truth 18)" in done.stdout and "(truth 25)" in done.stdout
    assert (tmp_path / "misfit.png").exists() and (tmp_path / "admittance.png").exists()


def test_fit_reads_observation_units_and_a_mask_with_gaps(tmp_path):
    """The fit's inputs follow the one grid-input rule: units honoured, NaN not compared."""
    from gridflex.scenario.tables import load_scenario
    from gridflex.workflows.fit import fit_scenario

    _write_inputs(tmp_path)
    with xr.open_dataset(tmp_path / "observed.nc") as ds:
        depth = ds["depth"].load()
    km = (depth / 1e3).assign_attrs(units="km")
    xr.Dataset({"depth": km}).to_netcdf(tmp_path / "observed_km.nc")
    mask = xr.ones_like(depth).where(depth["x"] > 0)  # west half: NaN, not compared
    xr.Dataset({"use": mask}).to_netcdf(tmp_path / "mask.nc")
    (tmp_path / "s.toml").write_text(
        BASE
        + """
[output]
file = "best.nc"

[fit]
observed_file = "observed_km.nc"
observed_variable = "depth"
mask_file = "mask.nc"
mask_variable = "use"
quantity = "surface"
te_min = "2 km"
te_max = "80 km"
"""
    )
    outcome = fit_scenario(load_scenario(tmp_path / "s.toml"))
    compared = np.isfinite(depth.values) & (depth["x"].values[None, :] > 0)
    assert outcome.fit.n_data == int(compared.sum())
    observed = outcome.result["observed"].values
    assert_allclose(observed[compared], depth.values[compared], rtol=1e-12)
    assert outcome.text.startswith("te = ")
    assert outcome.written[0] == tmp_path / "best.nc"
