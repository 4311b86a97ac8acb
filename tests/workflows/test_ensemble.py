"""``gridflex ensemble`` (gridflex.workflows.ensemble): real runs, real files, exit codes."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import Plate, ensemble
from gridflex.cli.main import main
from tests.helpers import BASE, run_cli, write_seamount_inputs

TABLE = """
[output]
file = "ens.nc"
std_map = "spread.png"
exceedance_map = "exceedance.png"

[ensemble]
members = 40
seed = 4
te = {distribution = "normal", mean = "12 km", std = "2 km"}
mantle_density = ["3250 kg/m3", "3300 kg/m3", "3350 kg/m3"]
load_scale = {distribution = "uniform", low = 0.9, high = 1.1}
thresholds = ["300 m", "0.6 km"]
"""


def test_ensemble_writes_statistics_and_maps(tmp_path):
    load = write_seamount_inputs(tmp_path)
    (tmp_path / "s.toml").write_text(BASE + TABLE)
    done = run_cli("ensemble", "s.toml", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    for name in ("ens.nc", "spread.png", "exceedance.png"):
        assert (tmp_path / name).stat().st_size > 0, name
    spread = {
        "te": scipy.stats.norm(12e3, 2e3),
        "mantle_density": [3250.0, 3300.0, 3350.0],
        "load_scale": scipy.stats.uniform(0.9, 0.2),
    }
    # the scenario's units and distributions are those of the library call (the same
    # draws from the same seed; common practice)
    expected = ensemble(load, Plate(te=10e3), spread, members=40, seed=4, thresholds=[300.0, 600.0])
    with xr.open_dataset(tmp_path / "ens.nc") as ds:
        assert list(ds["quantity"].values) == ["deflection"]
        assert_allclose(ds["threshold"], [300.0, 600.0])
        assert_allclose(ds["sample_te"], expected["sample_te"], rtol=1e-12)
        peak = float(np.abs(expected["mean"]).max())
        assert_allclose(ds["mean"], expected["mean"], rtol=0, atol=1e-6 * peak)
        assert_allclose(ds["exceedance_probability"], expected["exceedance_probability"])
        assert ds.attrs["ensemble_members"] == 40
        assert "ensemble s.toml" in ds.attrs["history"]


def test_te_grid_takes_a_factor_and_infill_adds_the_moat_fill(tmp_path):
    (tmp_path / "s.toml").write_text(
        """
[plate]
mantle_density = 3300

[margin]
line = [[-1, -100000], [1, 100000]]
te_left = "10 km"
te_right = "20 km"
width = "20 km"

[grid]
columns = 24
rows = 24
spacing = "6 km"

[[loads]]
synthetic = "gaussian"
height = "2 km"
radius = "15 km"
density = 2800

[infill]
base_elevation = "-3 km"

[output]
file = "ens.nc"

[ensemble]
members = 4
te = [0.8, 1.2]
quantiles = [0.5]
"""
    )
    assert main(["ensemble", str(tmp_path / "s.toml"), "-q"]) == 0
    with xr.open_dataset(tmp_path / "ens.nc") as ds:
        assert list(ds["quantity"].values) == ["deflection", "moat_fill"]
        assert ds.attrs["ensemble_te"] == "factor on the te grid"
        assert set(np.unique(ds["sample_te"])) <= {0.8, 1.2}
        assert float(ds["mean"].sel(quantity="moat_fill").max()) > 0


@pytest.mark.parametrize(
    ("table", "match"),
    [
        ('te = {mean = "1 km", std = "1 km"}', "name the distribution"),
        ('te = {distribution = "gamma", mean = "1 km"}', "distribution must be one of"),
        ('te = {distribution = "normal", mean = "10 km"}', "takes mean, std"),
        ('te = {distribution = "normal", mean = "10 km", std = "-1 km"}', "std must be > 0"),
        ('te = ["5 parsecs"]', "unit 'parsecs'"),
        ('load_scale = ["1 km"]', "expected a number"),
        ("te = []", "list of samples or a table"),
        ("seed = 1", "draws nothing"),
        ('te = ["10 km"]\nwater_density = [1000]', "needs infill="),
        ("density = [1]", "unknown key 'density'"),
        ('te = ["10 km"]\n[solver]\ninplane_force_x = -1e12', "no in-plane force"),
    ],
)
def test_bad_tables_are_refused(tmp_path, capsys, table, match):
    write_seamount_inputs(tmp_path)
    (tmp_path / "s.toml").write_text(BASE + f'\n[output]\nfile = "o.nc"\n\n[ensemble]\n{table}\n')
    assert main(["ensemble", str(tmp_path / "s.toml")]) == 2
    assert match in capsys.readouterr().err
    assert not (tmp_path / "o.nc").exists()


def test_missing_table_is_refused(tmp_path, capsys):
    write_seamount_inputs(tmp_path)
    (tmp_path / "s.toml").write_text(BASE + '\n[output]\nfile = "o.nc"\n')
    assert main(["ensemble", str(tmp_path / "s.toml")]) == 2
    assert "needs an [ensemble] table" in capsys.readouterr().err


@pytest.mark.parametrize(
    ("ensemble_table", "match"),
    [
        ('\n[ensemble]\nte = ["10 km"]\n', "exceedance_map: needs [ensemble] thresholds"),
        ("", "exceedance_map: needs [ensemble]"),
    ],
)
def test_exceedance_map_needs_thresholds(tmp_path, capsys, ensemble_table, match):
    write_seamount_inputs(tmp_path)
    (tmp_path / "s.toml").write_text(
        BASE + '\n[output]\nfile = "o.nc"\nexceedance_map = "e.png"\n' + ensemble_table
    )
    command = "ensemble" if ensemble_table else "run"
    assert main([command, str(tmp_path / "s.toml")]) == 2
    assert match in capsys.readouterr().err
