"""History scenarios and the ``gridflex history`` command, with real files."""

from __future__ import annotations

from pathlib import Path

import netCDF4
import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose
from rasterio.crs import CRS

from gridflex import InputError, Plate, ice_response
from gridflex.cli.main import main
from gridflex.errors import NodataWarning
from gridflex.io.time_grids import read_history
from gridflex.synthetic import disc_height, empty_grid
from gridflex.workflows.history import load_history_scenario, run_history_scenario
from tests.helpers import REPO_ROOT, write_time_grid

SYNTHETIC = """
[plate]
elastic_thickness = "80 km"

[mantle]
model = "half-space"
viscosity = "1e21 Pa s"

[grid]
rows = 40
columns = 40
spacing = "40 km"

[ice]
synthetic = "disc"
radius = "400 km"
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
x = "400 km"
y = "0 km"

[output]
file = "out/ice.nc"
rate_map = "out/rate.png"
rate_time = "-5 kyr"
series_plot = "out/series.png"
"""


def _write(tmp_path: Path, text: str, name: str = "history.toml") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


def test_history_command_writes_cf_netcdf_map_and_series(tmp_path, capsys):
    path = _write(tmp_path, SYNTHETIC)
    assert main(["history", str(path)]) == 0
    captured = capsys.readouterr()
    assert "4/4" in captured.err  # progress over the time steps
    assert "centre: deflection" in captured.out
    for name in ("ice.nc", "rate.png", "series.png"):
        assert (tmp_path / "out" / name).stat().st_size > 0
    with netCDF4.Dataset(tmp_path / "out" / "ice.nc") as nc:
        time = nc["time"]
        assert time.units == "days since 1950-01-01 00:00:00"  # CF time axis
        assert time.calendar == "proleptic_gregorian"
        assert time.axis == "T"
        assert_allclose(nc["time_years"][:], [-20000, -15000, -10000, -5000, 0])
        assert nc["uplift_rate"].units == "m yr-1"
        assert nc["deflection"].dimensions == ("time", "y", "x")
    # same numbers as the library call (common practice: the CLI adds nothing numerical)
    grid = empty_grid(40, 40, 40e3)
    disc = disc_height(grid, 400e3, 2000.0)
    factors = np.array([0.0, 1.0, 1.0, 0.2, 0.0])
    ice = xr.DataArray(
        factors[:, None, None] * disc.values[None],
        dims=("time", "y", "x"),
        coords={"time": [-20000.0, -15000, -10000, -5000, 0], "y": grid.y, "x": grid.x},
    )
    plate = Plate(te=80e3, infill_density=0.0)
    expected = ice_response(ice, xr.full_like(grid, 300.0), plate)
    written = xr.open_dataset(tmp_path / "out" / "ice.nc", decode_times=False)
    assert_allclose(written.deflection.values, expected.deflection.values, rtol=0, atol=1e-9)
    assert_allclose(written.vertical_displacement.values, -expected.deflection.values, atol=1e-9)
    written.close()
    # a second run refuses to overwrite without --overwrite
    assert main(["history", str(path)]) == 2
    assert "--overwrite" in capsys.readouterr().err


def test_history_from_files_with_cf_days(tmp_path):
    grid = empty_grid(32, 32, 50e3)
    disc = disc_height(grid, 300e3, 1500.0)
    days = np.array([0.0, 2000.0, 6000.0]) * 365.25
    stack = np.stack([disc.values] * 3)
    stack[:, 0, 0] = np.nan  # ice-free cells marked missing, as ice models often write
    ice = xr.Dataset(
        {"thk": (("time", "y", "x"), stack, {"units": "m"})},
        coords={
            "time": ("time", days, {"units": "days since 1950-01-01", "calendar": "julian"}),
            "y": ("y", grid.y.values / 1e3, {"units": "km"}),
            "x": ("x", grid.x.values / 1e3, {"units": "km"}),
        },
    )
    ice.to_netcdf(tmp_path / "ice_in.nc")
    bed = xr.Dataset(
        {"topg": (("y", "x"), np.full((32, 32), -100.0), {"units": "m"})},
        coords={"y": grid.y.values, "x": grid.x.values},
    )
    bed.to_netcdf(tmp_path / "bed_in.nc")
    history = read_history(tmp_path / "ice_in.nc", "thk")
    # 2000 Julian years of days since 1950 in the Julian calendar: exact by construction
    assert_allclose(history.time.values, [0.0, 2000.0, 6000.0], rtol=0, atol=1e-6)
    assert_allclose(history.x.values, grid.x.values)
    text = f"""
[plate]
elastic_thickness = "50 km"
[mantle]
model = "relaxing"
relaxation_time = "3 kyr"
[solver]
edges = "periodic"      # the sea-level rise loads an ocean that fills the grid
[ice]
file = "{tmp_path / "ice_in.nc"}"
variable = "thk"
[bed]
file = "bed_in.nc"
variable = "topg"
[sea]
level = "5 m"
[output]
file = "res.nc"
"""
    path = _write(tmp_path, text)
    with pytest.warns(NodataWarning, match="3 nodata or NaN cell"):
        outcome = run_history_scenario(load_history_scenario(path))
    assert outcome.written == [tmp_path / "res.nc"]
    with xr.open_dataset(tmp_path / "res.nc", decode_times=False) as out:
        assert_allclose(out.sea_level.values, 5.0)
        assert out.attrs["time_model"] == "relaxing"
        assert out.deflection.values[-1].max() > 0
        assert out.ice_thickness.values[0, 0, 0] == 0.0
    strict_text = text.replace('variable = "thk"', 'variable = "thk"\nmissing = "error"')
    strict = _write(tmp_path, strict_text, "strict.toml")
    with pytest.raises(InputError, match="3 nodata or NaN cell"):
        run_history_scenario(load_history_scenario(strict), overwrite=True)


@pytest.mark.parametrize(
    ("edit", "match"),
    [
        (
            lambda t: t.replace(
                'elastic_thickness = "80 km"', 'elastic_thickness = "80 km"\ninfill_density = 1030'
            ),
            r"\[plate\] infill_density: must be 0 for an ice history",
        ),
        (lambda t: t.replace('elevation = "300 m"', ""), r"\[bed\]: give either 'file'"),
        (
            lambda t: t.replace(
                "thickness_factors = [0.0, 1.0, 1.0, 0.2, 0.0]", "thickness_factors = [0.0, 1.0]"
            ),
            r"times has 5 values, thickness_factors 2",
        ),
        (
            lambda t: t.replace('model = "half-space"', 'model = "maxwell"'),
            r"\[mantle\] model must be one of .*; got 'maxwell'",
        ),
        (
            lambda t: t.replace('viscosity = "1e21 Pa s"', 'viscosity = "1e21 Pa"'),
            r"\[mantle\] viscosity: unit 'Pa' is not a viscosity",
        ),
    ],
)
def test_bad_history_scenarios_name_table_and_key(tmp_path, edit, match):
    with pytest.raises(InputError, match=match):
        load_history_scenario(_write(tmp_path, edit(SYNTHETIC)))


def test_rate_time_outside_the_history_is_refused(tmp_path, capsys):
    path = _write(tmp_path, SYNTHETIC.replace('rate_time = "-5 kyr"', 'rate_time = "5 kyr"'))
    assert main(["history", str(path), "-q"]) == 2
    assert "rate_time: 5000 years is outside the history" in capsys.readouterr().err
    assert not (tmp_path / "out" / "ice.nc").exists()  # refused before any output


def test_point_outside_the_grid_is_refused_before_running(tmp_path, capsys):
    path = _write(tmp_path, SYNTHETIC.replace('x = "400 km"', 'x = "4000 km"'))
    assert main(["history", str(path), "-q"]) == 2
    assert "#2: point (4e+06, 0) m lies outside the grid" in capsys.readouterr().err
    assert not (tmp_path / "out" / "ice.nc").exists()


def test_shipped_history_scenario_is_valid():
    path = REPO_ROOT / "configs" / "ice_history.toml"
    scenario = load_history_scenario(path)
    assert scenario.table("mantle")["model"] == "half-space"
    assert len(scenario.table("points")) == 3


def test_sea_level_series_from_a_file(tmp_path):
    # 10 m of sea-level rise over a 1000 m deep ocean, Te = 0: at equilibrium the water
    # column grows by 10 m plus the depression, w = rho_w 10 / (rho_m - rho_w)
    # (hydro-isostasy, common practice). Steps of 250 yr << tau keep the lag small.
    kyr = np.arange(0.0, 60.001, 0.25)
    levels = np.where(kyr > 0, 10.0, 0.0)
    series = xr.Dataset(
        {"sl": ("time", levels, {"units": "m"})}, coords={"time": ("time", kyr, {"units": "kyr"})}
    )
    series.to_netcdf(tmp_path / "sea.nc")
    years = ", ".join(f"{t * 1e3:g}" for t in kyr)
    zeros = ", ".join("0" for _ in kyr)
    text = f"""
[plate]
elastic_thickness = 0
[mantle]
model = "relaxing"
relaxation_time = "3 kyr"
[solver]
edges = "periodic"
[grid]
rows = 8
columns = 8
spacing = "50 km"
[ice]
synthetic = "disc"
radius = "1 km"
height = 0
times = [{years}]
thickness_factors = [{zeros}]
[bed]
elevation = "-1000 m"
[sea]
file = "sea.nc"
variable = "sl"
[output]
file = "sea_out.nc"
"""
    assert main(["history", str(_write(tmp_path, text)), "-q"]) == 0
    with xr.open_dataset(tmp_path / "sea_out.nc", decode_times=False) as out:
        assert_allclose(out.sea_level.values, levels)
        # 60 kyr = 14 effective relaxation times tau rho_m / (rho_m - rho_w): within 1e-5
        assert_allclose(out.deflection.values[-1], 1030.0 * 10.0 / (3300.0 - 1030.0), rtol=1e-5)
        assert "reference_load" in out


def test_coupling_example_runs():
    import subprocess
    import sys

    script = REPO_ROOT / "examples" / "ice_coupling.py"
    done = subprocess.run(
        [sys.executable, str(script)], capture_output=True, text=True, timeout=300
    )
    assert done.returncode == 0, done.stderr
    assert "uplift rate" in done.stdout


def _ice_and_bed_files(tmp_path: Path, ice_units: str, ice_scale: float) -> str:
    """Ice (time, y, x) and bed NetCDF files on one metric grid; the scenario text."""
    grid = empty_grid(16, 16, 50e3)
    disc = disc_height(grid, 200e3, 1500.0).values * ice_scale
    xr.Dataset(
        {"thk": (("time", "y", "x"), np.stack([0.0 * disc, disc]), {"units": ice_units})},
        coords={"time": ("time", [0.0, 5000.0], {"units": "yr"}), "y": grid.y, "x": grid.x},
    ).to_netcdf(tmp_path / "ice.nc")
    xr.Dataset(
        {"topg": (("y", "x"), np.full((16, 16), 200.0), {"units": "m"})},
        coords={"y": grid.y.values, "x": grid.x.values},
    ).to_netcdf(tmp_path / "bed.nc")
    return """
[plate]
elastic_thickness = "40 km"
[ice]
file = "ice.nc"
variable = "thk"
[bed]
file = "bed.nc"
variable = "topg"
[output]
file = "res.nc"
"""


def test_ice_thickness_units_are_honoured(tmp_path):
    """The same ice given in km and in m gives the same ice load (unit rule of all inputs)."""
    text = _ice_and_bed_files(tmp_path, "km", 1e-3)
    outcome = run_history_scenario(load_history_scenario(_write(tmp_path, text)))
    assert_allclose(float(outcome.result["ice_thickness"].max()), 1500.0, rtol=1e-12)
    _ice_and_bed_files(tmp_path, "furlong", 1.0)
    with pytest.raises(InputError, match=r"\[ice\] file: ice\.nc: variable 'thk': unit 'furlong'"):
        run_history_scenario(load_history_scenario(_write(tmp_path, text)), overwrite=True)


def test_bed_in_a_geographic_crs_is_refused(tmp_path):
    """A geographic bed is recognised from its CRS (a GeoTIFF says nothing about degrees)."""
    import rasterio
    from affine import Affine

    text = _ice_and_bed_files(tmp_path, "m", 1.0).replace("bed.nc", "bed.tif")
    with rasterio.open(
        tmp_path / "bed.tif",
        "w",
        driver="GTiff",
        width=16,
        height=16,
        count=1,
        dtype="float64",
        crs="EPSG:4326",
        transform=Affine(0.5, 0.0, -4.0, 0.0, -0.5, 60.0),
    ) as dst:
        dst.write(np.full((16, 16), 200.0), 1)
        dst.set_band_description(1, "topg")
    with pytest.raises(InputError, match=r"\[bed\] file: bed\.tif: .*longitude/latitude"):
        run_history_scenario(load_history_scenario(_write(tmp_path, text)))
    assert not (tmp_path / "res.nc").exists()


def test_series_plot_without_points_is_refused_before_the_run(tmp_path):
    text = _ice_and_bed_files(tmp_path, "m", 1.0) + 'series_plot = "series.png"\n'
    with pytest.raises(InputError, match=r"series_plot: needs at least one \[\[points\]\]"):
        run_history_scenario(load_history_scenario(_write(tmp_path, text)))
    assert not (tmp_path / "res.nc").exists()  # nothing written


LAEA = "+proj=laea +lat_0=60 +lon_0=10 +datum=WGS84 +units=m +no_defs"
"""An invented local equal-area projection of the ice grids below."""

FILE_SCENARIO = """
[plate]
elastic_thickness = "40 km"
[mantle]
model = "relaxing"
relaxation_time = "3 kyr"
[ice]
file = "ice.nc"
variable = "thk"
[bed]
file = "{bed}"
variable = "topg"
[output]
file = "res.nc"
"""


def _ice_file(tmp_path: Path, times, time_attrs, values=None, crs=LAEA, **kw) -> np.ndarray:
    """A 16 x 16 ice history of 50 km cells (rows south to north) in ``ice.nc``: 1000 m of
    ice within 200 km of (400, 400) km, growing through the given times; the ice (m)."""
    centres = (np.arange(16) + 0.5) * 50e3
    cap = np.hypot(*np.meshgrid(centres - 400e3, centres - 400e3)) < 200e3
    if values is None:
        values = np.stack([cap * 1000.0 * k / max(len(times) - 1, 1) for k in range(len(times))])
    write_time_grid(
        tmp_path / "ice.nc",
        "thk",
        times,
        values,
        time_attrs=time_attrs,
        shape=(16, 16),
        spacing=50e3,
        crs=crs,
        **kw,
    )
    return values


def _north_up_bed(path: Path, crs=LAEA, values=None) -> np.ndarray:
    """The bed of the ice grid as a north-up GeoTIFF (rows north to south): 200 m plus
    y / 1000 (so its row order shows); the bed on south-to-north rows."""
    import rasterio
    from affine import Affine

    y = (np.arange(16) + 0.5) * 50e3
    bed = np.repeat((200.0 + y / 1000.0)[:, None], 16, axis=1) if values is None else values
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=16,
        height=16,
        count=1,
        dtype="float32",
        crs=crs,
        transform=Affine(50e3, 0.0, 0.0, 0.0, -50e3, 16 * 50e3),
    ) as dst:
        dst.write(bed[::-1].astype(np.float32), 1)
        dst.set_band_description(1, "topg")
    return bed


def test_north_up_geotiff_bed_on_a_netcdf_ice_grid_and_the_crs_goes_out(tmp_path):
    import rasterio

    # noleap days of 365 (CF conventions 1.8 section 4.4.1): 0, 2 and 6 kyr
    _ice_file(
        tmp_path,
        np.array([0.0, 2000.0, 6000.0]) * 365.0,
        {"units": "days since 1950-01-01", "calendar": "noleap"},
    )
    bed = _north_up_bed(tmp_path / "bed.tif")
    text = FILE_SCENARIO.format(bed="bed.tif")
    outcome = run_history_scenario(load_history_scenario(_write(tmp_path, text)))
    out = outcome.result
    assert_allclose(out["time_years"].values, [0.0, 2000.0, 6000.0], rtol=0, atol=1e-9)
    assert_allclose(out["y"].values, (np.arange(16) + 0.5) * 50e3)  # the ice grid's order
    # at rest at the first time (initial = "rest"), the bed is the file's bed, row by row
    assert_allclose(out["bed_elevation"].values[0], bed, rtol=0, atol=1e-4)
    # GDAL reads the CRS of the CF grid mapping (CF conventions 1.8 section 5.6)
    with rasterio.open(f"netcdf:{tmp_path / 'res.nc'}:deflection") as src:
        assert src.crs == CRS.from_user_input(LAEA)
        assert src.count == 3
        assert_allclose(src.bounds, (0.0, 0.0, 800e3, 800e3))
        top_row = src.read(3)[0]  # GDAL shows north up: the last time, northernmost row
    assert_allclose(top_row, out["deflection"].values[2, -1], rtol=1e-6)


def test_bed_in_another_crs_is_refused(tmp_path):
    _ice_file(tmp_path, [0.0, 1000.0], {"units": "yr"})
    _north_up_bed(tmp_path / "bed.tif", crs="+proj=laea +lat_0=50 +lon_0=10 +datum=WGS84")
    text = FILE_SCENARIO.format(bed="bed.tif")
    with pytest.raises(InputError, match=r"\[bed\] file: the bed's CRS .* differs from the ice"):
        run_history_scenario(load_history_scenario(_write(tmp_path, text)))
    assert not (tmp_path / "res.nc").exists()


def test_ice_crs_is_taken_from_the_bed_when_only_the_bed_has_one(tmp_path):
    import rasterio

    _ice_file(tmp_path, [0.0, 1000.0], {"units": "yr"}, crs=None)
    _north_up_bed(tmp_path / "bed.tif")
    run_history_scenario(
        load_history_scenario(_write(tmp_path, FILE_SCENARIO.format(bed="bed.tif")))
    )
    with rasterio.open(f"netcdf:{tmp_path / 'res.nc'}:deflection") as src:
        assert src.crs == CRS.from_user_input(LAEA)


def test_ages_before_present_play_the_history_forward(tmp_path):
    # ka BP, youngest first: time = -age (common practice: BP counts back from 1950)
    values = _ice_file(tmp_path, [0.0, 5.0, 10.0], {"units": "ka BP"})
    _north_up_bed(tmp_path / "bed.tif")
    outcome = run_history_scenario(
        load_history_scenario(_write(tmp_path, FILE_SCENARIO.format(bed="bed.tif")))
    )
    out = outcome.result
    assert_allclose(out["time_years"].values, [-10_000.0, -5000.0, 0.0])
    assert_allclose(out["ice_thickness"].values, values[::-1])  # the 10 ka ice comes first


def test_fill_values_are_missing_and_impossible_ice_is_refused(tmp_path):
    _north_up_bed(tmp_path / "bed.tif")
    text = FILE_SCENARIO.format(bed="bed.tif")
    # netCDF default fill (9.96921e36 for float32; NetCDF Users Guide) in 5 cells: before,
    # 1e37 m of ice; now missing, zero ice by the "missing" policy, with a warning
    values = _ice_file(tmp_path, [0.0, 1000.0], {"units": "yr"}).astype(np.float32)
    values[1, 0, :5] = netCDF4.default_fillvals["f4"]
    _ice_file(tmp_path, [0.0, 1000.0], {"units": "yr"}, values=values, dtype="f4")
    with pytest.warns(NodataWarning, match="5 nodata or NaN cell"):
        outcome = run_history_scenario(load_history_scenario(_write(tmp_path, text)))
    assert float(outcome.result["ice_thickness"].max()) == 1000.0
    # 6 km of ice given in km: above the 5000 m the thickest ice on Earth stays below
    # (common practice), after the unit conversion
    kilometres = values / 1000.0
    kilometres[1, 3, 3] = 6.0
    kilometres[1, 3, 4] = 5.5
    kilometres[1, 0, :5] = 0.0
    _ice_file(tmp_path, [0.0, 1000.0], {"units": "yr"}, values=kilometres, attrs={"units": "km"})
    with pytest.raises(
        InputError,
        match=r"\[ice\] file: ice\.nc: variable 'thk'.*: 2 cell\(s\) above 5000, up to 6000",
    ):
        run_history_scenario(load_history_scenario(_write(tmp_path, text)), overwrite=True)


def test_bed_with_an_undeclared_fill_value_is_refused(tmp_path):
    # a GeoTIFF bed holding netCDF's default fill value without declaring it: the shared
    # reader refuses it as an undeclared fill value (and the bed's range of 11 km, the
    # deepest trench, would refuse it too; common practice)
    _ice_file(tmp_path, [0.0, 1000.0], {"units": "yr"})
    bed = np.full((16, 16), 100.0, dtype=np.float32)
    bed[2, 2] = netCDF4.default_fillvals["f4"]
    _north_up_bed(tmp_path / "bed.tif", values=bed)
    with pytest.raises(
        InputError, match=r"\[bed\] file: .*bed\.tif.*(1 cell\(s\) above 11000|a fill value)"
    ):
        run_history_scenario(
            load_history_scenario(_write(tmp_path, FILE_SCENARIO.format(bed="bed.tif")))
        )


SEA_SCENARIO = """
[plate]
elastic_thickness = "40 km"
[mantle]
model = "relaxing"
[solver]
edges = "periodic"
[grid]
rows = 8
columns = 8
spacing = "50 km"
[ice]
synthetic = "disc"
radius = "100 km"
height = "1000 m"
times = [-20000, -15000, -10000, -5000, 0]
thickness_factors = [1, 1, 0.5, 0, 0]
[bed]
elevation = "-500 m"
[sea]
file = "sea.nc"
variable = "sl"
[output]
file = "sea_out.nc"
"""


def _sea_file(tmp_path: Path, kyr: list[float], levels: list[float]) -> None:
    xr.Dataset(
        {"sl": ("time", np.asarray(levels), {"units": "m"})},
        coords={"time": ("time", np.asarray(kyr), {"units": "kyr"})},
    ).to_netcdf(tmp_path / "sea.nc")


def test_sea_level_series_is_interpolated_onto_the_ice_times(tmp_path):
    _sea_file(tmp_path, [-20.0, -10.0, 0.0], [-120.0, -60.0, 0.0])
    outcome = run_history_scenario(load_history_scenario(_write(tmp_path, SEA_SCENARIO)))
    # linear in time between the series' times (the documented rule)
    assert_allclose(outcome.result["sea_level"].values, [-120.0, -90.0, -60.0, -30.0, 0.0])


def test_sea_level_is_never_extrapolated(tmp_path):
    _sea_file(tmp_path, [-10.0, 0.0], [-60.0, 0.0])
    with pytest.raises(
        InputError,
        match=r"\[sea\] file: sea\.nc: variable 'sl': the series covers -10000 to 0 years but "
        r"sea level is needed from -20000 to 0 years \(2 time\(s\) outside\)",
    ):
        run_history_scenario(load_history_scenario(_write(tmp_path, SEA_SCENARIO)))
    assert not (tmp_path / "sea_out.nc").exists()
