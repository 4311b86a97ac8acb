"""``gridflex profile`` on the stage and step outputs of ``gridflex basin`` (real files)."""

import csv

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex.cli.main import main
from tests.helpers import BASIN_CELL, BASIN_SCENARIO, write_basin_inputs

N = 24
ROW = 11  # the profile follows this row of cells, node to node
LINE = ["--start", "0", str(ROW * BASIN_CELL), "--end", str((N - 1) * BASIN_CELL)]
LINE += [str(ROW * BASIN_CELL), "--samples", str(N)]


@pytest.fixture(scope="module")
def basin_output(tmp_path_factory):
    folder = tmp_path_factory.mktemp("basin")
    write_basin_inputs(folder, N)
    (folder / "basin.toml").write_text(BASIN_SCENARIO + '\n[output]\nfile = "basin.nc"\n')
    assert main(["basin", "-q", str(folder / "basin.toml")]) == 0
    with xr.open_dataset(folder / "basin.nc") as ds:
        return folder, ds.load()


def _table(path):
    with open(path) as handle:
        rows = list(csv.reader(handle))
    return rows[0], np.array(rows[1:], dtype=float)


def test_profile_of_a_staged_basin_has_a_column_per_stage_and_horizon(basin_output):
    # sampling on the grid's nodes returns the grid's values (bilinear interpolation is
    # exact at the nodes; common practice), for every stage and horizon of the file
    folder, ds = basin_output
    out = folder / "all.csv"
    assert main(["profile", str(folder / "basin.nc"), *LINE, "--csv", str(out), "-q"]) == 0
    header, values = _table(out)
    ages = ds["age"].values
    for j, age in enumerate(ages):
        column = header.index(f"deflection[age={age:g}] [m]")
        assert_allclose(values[:, column], ds["deflection"][j, ROW].values, rtol=1e-9)
        for k in range(3):
            column = header.index(f"horizon_depth[age={age:g}][horizon={k}] [m]")
            expected = ds["horizon_depth"][j, k, ROW].values
            if k > j:  # not deposited yet
                assert np.isnan(values[:, column]).all() and np.isnan(expected).all()
            else:
                assert_allclose(values[:, column], expected, rtol=1e-9, atol=1e-6)


def test_profile_at_one_stage_by_age_and_its_plot(basin_output):
    folder, ds = basin_output
    csv_path, png = folder / "one.csv", folder / "one.png"
    args = ["profile", str(folder / "basin.nc"), *LINE, "--at", "2.2e6"]
    assert main([*args, "--csv", str(csv_path), "--plot", str(png), "-q"]) == 0
    header, values = _table(csv_path)
    # the stage of age 2 Myr, the nearest to 2.2 Myr (not stage index 2)
    assert_allclose(values[:, header.index("deflection [m]")], ds["deflection"][1, ROW], rtol=1e-9)
    column = header.index("horizon_depth[horizon=1] [m]")
    assert_allclose(values[:, column], ds["horizon_depth"][1, 1, ROW], rtol=1e-9)
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_profile_refusals_on_basin_outputs_write_nothing(basin_output, tmp_path, capsys):
    folder, _ = basin_output
    result = str(folder / "basin.nc")
    # a variable that is not a grid
    code = main(
        ["profile", result, *LINE, "--csv", str(tmp_path / "a.csv"), "--variables"] + ["iterations"]
    )
    assert code == 2 and not (tmp_path / "a.csv").exists()
    assert "not a grid on (y, x): 'iterations'" in capsys.readouterr().err
    # a plot of all stages at once
    code = main(
        [
            "profile",
            result,
            *LINE,
            "--csv",
            str(tmp_path / "b.csv"),
            "--plot",
            str(tmp_path / "b.png"),
        ]
    )
    assert code == 2 and not (tmp_path / "b.csv").exists()
    assert "--plot draws one step; choose it with --at" in capsys.readouterr().err
    # --at on a file with two step axes is ambiguous
    with xr.open_dataset(result) as ds:
        both = ds[["deflection"]].load().expand_dims(time=[0.0, 1.0])
    both.to_netcdf(tmp_path / "both.nc")
    code = main(
        ["profile", str(tmp_path / "both.nc"), *LINE, "--at", "0", "--csv", str(tmp_path / "c.csv")]
    )
    assert code == 2 and not (tmp_path / "c.csv").exists()
    assert "--at needs exactly one axis of time, stage, step" in capsys.readouterr().err


def test_profile_of_a_layered_backstrip(basin_output, tmp_path, capsys):
    # the step output of a backstrip: a column per step; --plot (which draws the
    # deflection) refused with one message, nothing written
    folder, _ = basin_output
    (folder / "strip.toml").write_text(
        """
[plate]
elastic_thickness = "8 km"
[backstrip]
[[backstrip_layers]]
file = "s1.nc"
water_depth = 100.0
age = 2e6
[[backstrip_layers]]
file = "s2.nc"
water_depth = 50.0
age = 1e6
[output]
file = "strip.nc"
"""
    )
    assert main(["basin", "-q", str(folder / "strip.toml")]) == 0
    with xr.open_dataset(folder / "strip.nc") as ds:
        strip = ds.load()
    out = tmp_path / "strip.csv"
    assert main(["profile", str(folder / "strip.nc"), *LINE, "--csv", str(out), "-q"]) == 0
    header, values = _table(out)
    for j, age in enumerate(strip["age"].values):
        column = header.index(f"tectonic_subsidence[age={age:g}] [m]")
        assert_allclose(values[:, column], strip["tectonic_subsidence"][j, ROW], rtol=1e-9)
    code = main(
        ["profile", str(folder / "strip.nc"), *LINE, "--at", "0", "--csv", str(tmp_path / "p.csv")]
        + ["--plot", str(tmp_path / "p.png")]
    )
    assert code == 2 and not (tmp_path / "p.csv").exists()
    assert "--plot draws the deflection" in capsys.readouterr().err
