"""Scenario runs with [infill] and [gravity], and loads of kind "elevation"."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import (
    Infill,
    InputError,
    Plate,
    load_from_elevation,
    model_gravity,
    regional_surface,
    solve_with_infill,
)
from gridflex.errors import NodataWarning
from gridflex.scenario.tables import load_scenario
from gridflex.workflows.run import run_scenario
from tests.helpers import make_grid

SCENARIO = """
[plate]
elastic_thickness = "12 km"
crust_thickness = "7 km"

[[loads]]
name = "seamount"
kind = "elevation"
file = "bathymetry.nc"
variable = "elevation"
density = 2700
regional_radius = "60 km"

[infill]
sediment = "full"
sediment_density = 2200

[gravity]
observation_height = "500 m"

[output]
file = "out/result.nc"
moat_fill_map = "out/fill.png"
free_air_map = "out/free_air.png"
"""


def _write_bathymetry(path):
    grid = make_grid(80, 96, 2.5e3)
    r2 = (grid.y**2 + grid.x**2).values
    elevation = -4200.0 + 2.0e-3 * grid.x.values[None, :] + 3500.0 * np.exp(-r2 / (2 * 9e3**2))
    da = grid.copy(data=elevation).assign_attrs(units="m")
    xr.Dataset({"elevation": da}).to_netcdf(path)
    return da


def test_elevation_scenario_equals_library_calls(tmp_path):
    # The run must give what the library gives for the same inputs (common practice: the
    # scenario layer only wires the calls), and write the requested outputs.
    elevation = _write_bathymetry(tmp_path / "bathymetry.nc")
    (tmp_path / "s.toml").write_text(SCENARIO)
    outcome = run_scenario(load_scenario(tmp_path / "s.toml"))
    assert [p.name for p in outcome.written] == ["result.nc", "fill.png", "free_air.png"]
    loads = load_from_elevation(elevation, 2700.0, regional_surface(elevation, 60e3))
    plate = Plate(te=12e3, crust_thickness=7e3)
    expected = solve_with_infill(
        loads, plate, infill=Infill(sediment="full", sediment_density=2200.0)
    )
    gravity = model_gravity(expected, observation_height=500.0)
    with xr.open_dataset(tmp_path / "out" / "result.nc") as ds:
        assert_allclose(ds["deflection"].values, expected["deflection"].values, atol=1e-9)
        assert_allclose(ds["moat_fill"].values, expected["moat_fill"].values, atol=1e-9)
        assert_allclose(
            ds["free_air_anomaly"].values, gravity["free_air_anomaly"].values, atol=1e-9
        )
        assert ds["bouguer_anomaly"].attrs["units"] == "mGal"
        assert ds.attrs["infill_sediment"] == "full"
        assert ds.attrs["plate_crust_thickness"] == 7e3


def test_thickness_layers_stand_on_the_base_elevation(tmp_path):
    # With [infill] a thickness layer is stacked on base_elevation and buoyed by sea water
    # only where submerged (PHYSICS.md 0 rule 3): same as load_from_layers.
    text = """
[plate]
elastic_thickness = "10 km"

[grid]
rows = 64
columns = 64
spacing = "3 km"

[[loads]]
synthetic = "gaussian"
height = "5 km"
radius = "12 km"
density = 2800

[infill]
base_elevation = "-4000 m"

[output]
file = "r.nc"
"""
    (tmp_path / "s.toml").write_text(text)
    outcome = run_scenario(load_scenario(tmp_path / "s.toml"))
    result = outcome.result
    top = result["initial_surface"].values
    assert top.max() > 900.0  # the summit stands 1 km above sea level
    q = result["load"].values
    i = np.unravel_index(np.argmax(top), top.shape)
    height = top[i] + 4000.0
    assert_allclose(q[i], 9.81 * (1770.0 * 4000.0 + 2800.0 * (height - 4000.0)), rtol=1e-12)


@pytest.mark.parametrize(
    "change, message",
    [
        (
            lambda t: (
                t.replace("[infill]\n", "[infill]\nsediment_level = 1\n")
                .replace('"full"', '"to_level"')
                .replace("sediment_level = 1\n", "")
            ),
            r"\[infill\] sediment_level: required with sediment = 'to_level'",
        ),
        (
            lambda t: t.replace('regional_radius = "60 km"', ""),
            r"\[\[loads\]\] #1: give either regional_elevation or regional_radius",
        ),
        (
            lambda t: t.replace('[infill]\nsediment = "full"\nsediment_density = 2200\n', ""),
            r"a \[gravity\] table needs an \[infill\] table",
        ),
        (
            lambda t: t.replace('sediment = "full"', 'sediment = "some"'),
            r"\[infill\] sediment must be one of .*; got 'some'",
        ),
        (
            lambda t: t.replace("[gravity]\n", "[gravity]\nterms = 0\n"),
            r"\[gravity\] terms must be a whole number >= 1, got 0",
        ),
    ],
)
def test_bad_scenarios_name_table_and_key(tmp_path, change, message):
    (tmp_path / "s.toml").write_text(change(SCENARIO))
    with pytest.raises(InputError, match=message):
        load_scenario(tmp_path / "s.toml")


def test_displaced_density_is_refused_with_infill(tmp_path):
    text = (
        SCENARIO.replace('kind = "elevation"', 'kind = "thickness"')
        .replace('regional_radius = "60 km"', "displaced_density = 1030")
        .replace("[infill]\n", '[infill]\nbase_elevation = "-4 km"\n')
    )
    (tmp_path / "s.toml").write_text(text)
    with pytest.raises(InputError, match=r"#1 displaced_density: leave it out with \[infill\]"):
        load_scenario(tmp_path / "s.toml")


def test_observation_plane_below_the_summit_is_reported(tmp_path):
    _write_bathymetry(tmp_path / "bathymetry.nc")
    text = SCENARIO.replace('observation_height = "500 m"', 'observation_height = "-3 km"')
    (tmp_path / "s.toml").write_text(text)
    with pytest.raises(InputError, match=r"\[gravity\]: observation_height"):
        run_scenario(load_scenario(tmp_path / "s.toml"))
    assert not (tmp_path / "out" / "result.nc").exists()  # nothing written


def test_nodata_in_an_elevation_layer_means_no_edifice(tmp_path):
    # missing = "zero" means "no load" (scenario policy); for an elevation model that is the
    # surface at its typical level, not an elevation of 0 m (which would be a 4 km edifice).
    elevation = _write_bathymetry(tmp_path / "bathymetry.nc")
    holed = elevation.copy()
    holed.values[10:13, 46:50] = np.nan  # far from the seamount, where the trend is ~ median
    xr.Dataset({"elevation": holed}).to_netcdf(tmp_path / "holed.nc")
    text = SCENARIO.replace("bathymetry.nc", "holed.nc").replace(
        'regional_radius = "60 km"', 'regional_radius = "60 km"\nmissing = "zero"'
    )
    (tmp_path / "s.toml").write_text(text)
    with pytest.warns(NodataWarning, match="taken as no edifice"):
        outcome = run_scenario(load_scenario(tmp_path / "s.toml"))
    # nodata stays nodata in what is written
    assert np.isnan(outcome.result["load"].values[10:13, 46:50]).all()
    # elevation 0 there would load 4200 m of rock, (2700 - 1030) g 4200 ~ 7e7 Pa, and
    # deepen the plate; with no edifice there the deflection is that of the full grid
    (tmp_path / "full.toml").write_text(SCENARIO)
    full = run_scenario(load_scenario(tmp_path / "full.toml"), overwrite=True)
    w, w_full = outcome.result["deflection"].values, full.result["deflection"].values
    assert np.nanmax(np.abs(w - w_full)) <= 0.01 * np.abs(w_full).max()


def test_lonlat_bathymetry_geotiff_with_infill_and_gravity(tmp_path):
    # The GIS path: a longitude/latitude GeoTIFF bathymetry is resampled onto a metric
    # working grid, solved with infill and gravity there, and written back on the input grid
    # (common practice: the results must come back on the user's grid, finite, with a moat
    # filled by water and a free-air high over the edifice).
    import rasterio
    from affine import Affine

    lon0, lat0, step, ny, nx = 25.0, -30.0, 0.02, 100, 120
    transform = Affine(step, 0.0, lon0 - nx * step / 2, 0.0, -step, lat0 + ny * step / 2)
    lon = lon0 - nx * step / 2 + (np.arange(nx) + 0.5) * step
    lat = lat0 + ny * step / 2 - (np.arange(ny) + 0.5) * step
    km_x = (lon[None, :] - lon0) * 111.32 * np.cos(np.radians(lat0))
    km_y = (lat[:, None] - lat0) * 110.57
    depth = -4000.0 + 3500.0 * np.exp(-(km_x**2 + km_y**2) / (2 * 10.0**2))
    with rasterio.open(
        tmp_path / "bathymetry.tif",
        "w",
        driver="GTiff",
        width=nx,
        height=ny,
        count=1,
        dtype="float32",
        crs="EPSG:4326",
        transform=transform,
    ) as dst:
        dst.write(depth.astype(np.float32), 1)
    text = (
        SCENARIO.replace(
            'file = "bathymetry.nc"\nvariable = "elevation"', 'file = "bathymetry.tif"'
        )
        .replace('regional_radius = "60 km"', 'regional_elevation = "-4000 m"')
        .replace('sediment = "full"', 'sediment = "none"')
    )
    (tmp_path / "s.toml").write_text(text)
    outcome = run_scenario(load_scenario(tmp_path / "s.toml"))
    with xr.open_dataset(tmp_path / "out" / "result.nc") as ds:
        assert ds["deflection"].shape == (ny, nx)
        assert ds["lon"].attrs["units"] == "degrees_east"
        for name in ("moat_fill", "free_air_anomaly", "bouguer_anomaly", "surface"):
            assert np.isfinite(ds[name].values).all(), name
        assert float(ds["free_air_anomaly"].max()) > 50.0
        assert float(ds["fill_sediment"].max()) == 0.0
        assert float(ds["moat_fill"].max()) > 10.0
    assert outcome.summary["max_deflection"] > 10.0


def test_buried_load_from_the_scenario(tmp_path):
    # [infill] load_buried = true reads the elevation model as the surface after flexure
    # (PHYSICS.md 1.3 b): the surface under the load stays as observed.
    _write_bathymetry(tmp_path / "bathymetry.nc")
    text = SCENARIO.replace('sediment = "full"', 'sediment = "none"\nload_buried = true')
    (tmp_path / "s.toml").write_text(text)
    result = run_scenario(load_scenario(tmp_path / "s.toml")).result
    under = result["load_height"].values > 0
    assert float(result["load_root"].max()) > 10.0
    assert_allclose(
        result["surface"].values[under], result["initial_surface"].values[under], atol=1e-9
    )
