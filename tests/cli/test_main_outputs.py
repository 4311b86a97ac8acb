"""Outputs under stress from the command line: concurrent runs, a full disk, collisions.

Real ``gridflex`` processes writing real files; each check reads every output back and
asks which scenario wrote it.
"""

from __future__ import annotations

import os
import resource
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import rasterio
import xarray as xr

from gridflex.cli.main import main
from gridflex.errors import CompensationOutsideWarning
from gridflex.io.netcdf import read_result
from gridflex.results.profile import sample_profile
from gridflex.scenario.tables import load_scenario
from gridflex.workflows.run import run_scenario

SCENARIO = """
[plate]
elastic_thickness = "{te} km"

[grid]
rows = 64
columns = 64
spacing = "2 km"

[[loads]]
synthetic = "disc"
radius = "20 km"
height = "1 km"
density = 2800

[output]
file = "out/r.nc"
geotiff = ["deflection"]
profile_csv = "out/p.csv"
profile_start = [-50e3, 0]
profile_end = [50e3, 0]
{extra}
"""

START, END = (-50e3, 0.0), (50e3, 0.0)


def _write_scenarios(folder: Path, extra: str = "") -> list[str]:
    """Two scenarios writing the same outputs, on plates of 10 and 20 km."""
    names = []
    for te in (10, 20):
        (folder / f"te{te}.toml").write_text(SCENARIO.format(te=te, extra=extra))
        names.append(f"te{te}.toml")
    return names


def _gridflex(*args: str, cwd: Path, file_size: int | None = None) -> subprocess.Popen:
    """A ``gridflex`` process (optionally with a file-size limit, a full disk's effect)."""

    def limit() -> None:
        if file_size is not None:
            resource.setrlimit(resource.RLIMIT_FSIZE, (file_size, file_size))

    return subprocess.Popen(
        [sys.executable, "-m", "gridflex", *args],
        cwd=cwd,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        preexec_fn=limit,
    )


def _writer_of_every_file(out: Path) -> str:
    """The plate of the scenario that wrote the outputs in *out*, checked to be the same
    for every file: the NetCDF's scenario text, the GeoTIFF's and the CSV's values."""
    with xr.open_dataset(out / "r.nc") as ds:
        te = "10 km" if 'elastic_thickness = "10 km"' in ds.attrs["scenario"] else "20 km"
        assert f'elastic_thickness = "{te}"' in ds.attrs["scenario"]
        deflection = ds["deflection"].values
    with rasterio.open(out / "r_deflection.tif") as src:
        tif = src.read(1)
    np.testing.assert_array_equal(np.sort(tif.ravel()), np.sort(deflection.ravel()))
    table = np.genfromtxt(out / "p.csv", delimiter=",", names=True)
    expected = sample_profile(read_result(out / "r.nc"), START, END)["deflection"].values
    np.testing.assert_allclose(table["deflection_m"], expected, rtol=1e-9, atol=1e-9)
    return te


def _all_names(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


def test_two_runs_writing_the_same_outputs_at_once(tmp_path):
    # two pairs of runs at once (four processes): without --overwrite exactly one of a
    # pair may win and its folder holds only the winner's files; with it both succeed
    # and every file is from the same one of them
    runs = {}
    for overwrite in (False, True):
        folder = tmp_path / ("overwrite" if overwrite else "exclusive")
        folder.mkdir()
        flags = ["--overwrite"] if overwrite else []
        runs[folder] = [
            _gridflex("run", "-q", *flags, name, cwd=folder) for name in _write_scenarios(folder)
        ]
    for folder, pair in runs.items():
        results = [(run.wait(timeout=300), run.stderr.read()) for run in pair]  # type: ignore[union-attr]
        codes = sorted(code for code, _ in results)
        if folder.name == "overwrite":
            assert codes == [0, 0], results
        else:
            assert codes == [0, 2], results
            message = next(err for code, err in results if code == 2)
            assert message.count("\n") == 1 and "output exists" in message
        assert _writer_of_every_file(folder / "out") in ("10 km", "20 km")
        assert _all_names(folder / "out") == ["p.csv", "r.nc", "r_deflection.tif"]


def test_a_full_disk_during_an_overwrite_run_keeps_the_earlier_files(tmp_path):
    names = _write_scenarios(tmp_path, 'map = "out/map.png"')
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CompensationOutsideWarning)
        run_scenario(load_scenario(tmp_path / names[0]))
    before = {p.name: p.read_bytes() for p in (tmp_path / "out").iterdir()}
    assert set(before) == {"map.png", "p.csv", "r.nc", "r_deflection.tif"}
    # files of at most 80 kB: the NetCDF (~55 kB) and the GeoTIFF are written, the map
    # (~117 kB) is not
    run = _gridflex("run", "-q", "--overwrite", names[1], cwd=tmp_path, file_size=80_000)
    code = run.wait(timeout=300)
    stderr = run.stderr.read()  # type: ignore[union-attr]
    assert code == 2
    assert stderr.count("\n") == 1, stderr
    assert "map.png: cannot write (File too large); nothing of this run was kept" in stderr
    after = {p.name: p.read_bytes() for p in (tmp_path / "out").iterdir()}
    assert after == before  # no temporary left, every file the 10 km run's
    assert _writer_of_every_file(tmp_path / "out") == "10 km"


def test_profile_outputs_on_one_path_are_refused_before_reading(tmp_path, capsys):
    (tmp_path / "r.nc").write_text("not read")
    csv = tmp_path / "p.csv"
    args = ["profile", str(tmp_path / "r.nc"), "--start", "0", "0", "--end", "1", "1"]
    assert main([*args, "--csv", str(csv), "--plot", str(csv)]) == 2
    assert "--plot: " in capsys.readouterr().err
    assert main([*args, "--csv", str(tmp_path / "r.nc")]) == 2
    assert "overwrite an input file" in capsys.readouterr().err
    assert sorted(os.listdir(tmp_path)) == ["r.nc"]
