"""What a glaciologist takes from ``gridflex history``: point series as CSV, chosen output
times, float32 grids and a bed calibrated to the present day."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from gridflex import InputError, Plate, ice_response
from gridflex.cli.main import main
from gridflex.synthetic import disc_height, empty_grid
from gridflex.workflows.history import load_history_scenario, run_history_scenario

SCENARIO = """
[plate]
elastic_thickness = "80 km"

[mantle]
model = "relaxing"
relaxation_time = "3 kyr"

[grid]
rows = 24
columns = 24
spacing = "50 km"

[ice]
synthetic = "disc"
radius = "300 km"
height = "2000 m"
times = [-20000, -15000, -10000, -5000, 0]
thickness_factors = [0.0, 1.0, 1.0, 0.2, 0.0]

[bed]
elevation = "300 m"

[[points]]
name = "centre"
x = 0
y = 0

[[points]]
name = "edge"
x = "300 km"
y = "0 km"

[output]
file = "out/ice.nc"
series_csv = "out/series.csv"
"""


def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "history.toml"
    path.write_text(text)
    return path


def _ice() -> tuple[xr.DataArray, xr.DataArray]:
    grid = empty_grid(24, 24, 50e3)
    disc = disc_height(grid, 300e3, 2000.0)
    factors = np.array([0.0, 1.0, 1.0, 0.2, 0.0])
    ice = xr.DataArray(
        factors[:, None, None] * disc.values[None],
        dims=("time", "y", "x"),
        coords={"time": [-20000.0, -15000, -10000, -5000, 0], "y": grid.y, "x": grid.x},
    )
    return grid, ice


def test_point_series_are_written_as_csv(tmp_path, capsys):
    assert main(["history", str(_write(tmp_path, SCENARIO)), "-q"]) == 0
    assert capsys.readouterr().err == ""  # -q: no progress line
    with open(tmp_path / "out" / "series.csv", newline="") as handle:
        rows = list(csv.reader(handle))
    header = rows[0]
    assert header == [
        "time [years]",
        "centre:deflection [m]",
        "centre:uplift_rate [m yr-1]",
        "centre:bed_elevation [m]",
        "edge:deflection [m]",
        "edge:uplift_rate [m yr-1]",
        "edge:bed_elevation [m]",
    ]  # no elastic part: the result has no elastic_deflection
    table = np.array(rows[1:], dtype=float)
    written = xr.open_dataset(tmp_path / "out" / "ice.nc", decode_times=False)
    # the cell holding the point (0, 0): one of the four round it on this grid
    iy = int(np.argmin(np.abs(written.y.values - 0.0)))
    ix = int(np.argmin(np.abs(written.x.values - 0.0)))
    assert abs(written.y.values[iy]) == abs(written.x.values[ix]) == 25e3
    np.testing.assert_allclose(table[:, 0], [-20000, -15000, -10000, -5000, 0])
    for column, name in ((1, "deflection"), (2, "uplift_rate"), (3, "bed_elevation")):
        np.testing.assert_allclose(table[:, column], written[name].values[:, iy, ix], rtol=1e-9)
    assert table[:, 1].max() > 100.0  # the ice pushed the centre down
    written.close()


def test_point_series_csv_has_the_elastic_part_with_an_elastic_earth(tmp_path):
    # [mantle] elastic = true writes elastic_deflection; the series table then carries it
    # for each point, the same numbers as the written grid (common practice: the table
    # adds nothing numerical).
    text = SCENARIO.replace(
        'relaxation_time = "3 kyr"', 'relaxation_time = "3 kyr"\nelastic = true'
    )
    run_history_scenario(load_history_scenario(_write(tmp_path, text)))
    with open(tmp_path / "out" / "series.csv", newline="") as handle:
        rows = list(csv.reader(handle))
    assert rows[0][1:5] == [
        "centre:deflection [m]",
        "centre:uplift_rate [m yr-1]",
        "centre:bed_elevation [m]",
        "centre:elastic_deflection [m]",
    ]
    assert rows[0][8] == "edge:elastic_deflection [m]" and len(rows[0]) == 9
    table = np.array(rows[1:], dtype=float)
    written = xr.open_dataset(tmp_path / "out" / "ice.nc", decode_times=False)
    iy = int(np.argmin(np.abs(written.y.values - 0.0)))
    ix = int(np.argmin(np.abs(written.x.values - 0.0)))
    elastic = written.elastic_deflection.values[:, iy, ix]
    np.testing.assert_allclose(table[:, 4], elastic, rtol=1e-9)
    # under the full ice the elastic part is there and a small part of the deflection
    assert 0.5 < table[1, 4] < 0.5 * table[1, 1]
    written.close()


def test_output_times_with_units_and_float32(tmp_path):
    text = SCENARIO.replace(
        'series_csv = "out/series.csv"',
        'times = ["-15 kyr", "-12500 yr", 0]\ndtype = "float32"',
    )
    scenario = load_history_scenario(_write(tmp_path, text))
    outcome = run_history_scenario(scenario)
    written = xr.open_dataset(tmp_path / "out" / "ice.nc", decode_times=False)
    np.testing.assert_allclose(written.time_years.values, [-15000.0, -12500.0, 0.0])
    assert written.deflection.dtype == np.float32
    assert written.uplift_rate.dtype == np.float32
    # the same numbers as the library with those output times (rounded to float32)
    grid, ice = _ice()
    expected = ice_response(
        ice,
        xr.full_like(grid, 300.0),
        Plate(te=80e3, infill_density=0.0),
        model="relaxing",
        relaxation_time=3000.0,
        output_times=[-15000.0, -12500.0, 0.0],
    )
    np.testing.assert_allclose(
        written.deflection.values, expected.deflection.values.astype(np.float32), rtol=1e-6
    )
    assert outcome.summary["times"] == 3
    written.close()
    outside = SCENARIO.replace('series_csv = "out/series.csv"', 'times = ["-25 kyr", 0]')
    with pytest.raises(InputError, match=r"\[output\] times: -25000 years lies outside"):
        run_history_scenario(load_history_scenario(_write(tmp_path, outside)), overwrite=True)
    wrong = SCENARIO.replace('series_csv = "out/series.csv"', 'times = ["2 km"]')
    with pytest.raises(InputError, match=r"\[output\] times\[0\]"):
        load_history_scenario(_write(tmp_path, wrong))


@pytest.mark.parametrize("ocean", [False, True])
def test_present_day_bed_is_reached_at_the_last_time(ocean):
    # [bed] present_day: the reference bed is solved so that the run ends on the given bed
    # (definition of the calibration; issue 17). On land the load does not depend on the
    # bed and one correction is exact; with an ocean over a sloping floor (floatation and
    # the water load follow the bed, PHYSICS.md 7.1) the fixed point is iterated.
    grid, ice = _ice()
    given = xr.full_like(grid, 300.0)
    if ocean:
        given = (200.0 - 1.5e-3 * np.abs(grid.x) + 0.0 * grid).transpose("y", "x")
    plate = Plate(te=80e3, infill_density=0.0)
    out = ice_response(
        ice,
        given,
        plate,
        sea_level=-30.0,
        model="relaxing",
        relaxation_time=3000.0,
        edges="periodic",
        present_day=True,
    )
    final = out.bed_elevation.values[-1]
    assert np.abs(final - given.values).max() <= 1e-9
    if not ocean:
        assert out.attrs["present_day_runs"] == 2
    else:
        assert out.attrs["present_day_runs"] > 2
        assert out.grounded.values.max() == 1 and (given.values < -30.0).any()
    # the reference bed is not the given one: the plate has not recovered by 0 yr
    assert np.abs(out.reference_bed.values - given.values).max() > 1.0
    # running the reference bed forward without calibration gives the given bed back
    again = ice_response(
        ice,
        out.reference_bed,
        plate,
        sea_level=-30.0,
        model="relaxing",
        relaxation_time=3000.0,
        edges="periodic",
    )
    assert np.abs(again.bed_elevation.values[-1] - given.values).max() <= 1e-9


def test_present_day_key_of_a_history_scenario(tmp_path):
    text = SCENARIO.replace('elevation = "300 m"', 'elevation = "300 m"\npresent_day = true')
    outcome = run_history_scenario(load_history_scenario(_write(tmp_path, text)))
    bed = outcome.result["bed_elevation"].values
    assert np.abs(bed[-1] - 300.0).max() <= 1e-9  # the given bed, at the last time
    assert np.abs(bed[0] - 300.0).max() > 1.0  # earlier the bed was elsewhere
    assert "reference_bed" in outcome.result
