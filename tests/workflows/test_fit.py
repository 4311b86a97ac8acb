"""``gridflex fit`` (gridflex.workflows.fit): real runs, real files, exit codes."""

from __future__ import annotations

import json

import numpy as np
import xarray as xr
from numpy.testing import assert_allclose

from gridflex.cli.main import main
from tests.helpers import BASE, TRUE_TE, run_cli, write_seamount_inputs


def test_fit_writes_plot_summary_and_model(tmp_path):
    write_seamount_inputs(tmp_path)
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
    write_seamount_inputs(tmp_path)
    (tmp_path / "s.toml").write_text(BASE + '\n[output]\nfile = "o.nc"\n')
    assert main(["fit", str(tmp_path / "s.toml")]) == 2
    assert "needs a [fit] table" in capsys.readouterr().err


def test_fit_free_air_needs_depth(tmp_path, capsys):
    write_seamount_inputs(tmp_path)
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


def test_fit_reads_observation_units_and_a_mask_with_gaps(tmp_path):
    """The fit's inputs follow the one grid-input rule: units honoured, NaN not compared."""
    from gridflex.scenario.tables import load_scenario
    from gridflex.workflows.fit import fit_scenario

    write_seamount_inputs(tmp_path)
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


def test_fit_refuses_output_keys_it_cannot_honour(tmp_path, capsys):
    # a key the command would silently ignore is refused before any work (common practice)
    write_seamount_inputs(tmp_path)
    fit = '[fit]\nobserved_file = "observed.nc"\nobserved_variable = "depth"\n'
    for key, value in (("extent", '"response"'), ("geotiff", "true")):
        (tmp_path / "s.toml").write_text(
            BASE + f'\n[output]\nfile = "o.nc"\n{key} = {value}\n\n' + fit
        )
        assert main(["fit", str(tmp_path / "s.toml"), "-q"]) == 2
        assert f"[output] {key}" in capsys.readouterr().err
        assert not (tmp_path / "o.nc").exists()
