"""The ``gridflex basin`` command with real NetCDF files written and read back."""

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import Plate
from gridflex.basin import Stage, backstrip, stage_loading
from gridflex.cli.main import main
from gridflex.workflows.basin_tables import load_basin_scenario

N, DX = 40, 5e3


def _grid(values):
    coord = np.arange(N) * DX
    return xr.DataArray(values, dims=("y", "x"), coords={"y": coord, "x": coord})


def _lens(peak, radius):
    coord = np.arange(N) * DX
    y, x = np.meshgrid(coord, coord, indexing="ij")
    r2 = ((x - coord.mean()) ** 2 + (y - coord.mean()) ** 2) / radius**2
    return _grid(peak * np.exp(-r2) * (r2 < 9))


def _write(path, name, grid):
    grid.to_dataset(name=name).to_netcdf(path)
    return path


@pytest.fixture
def stage_files(tmp_path):
    shelf = _grid(np.broadcast_to(np.linspace(-400.0, 50.0, N), (N, N)).copy())
    _write(tmp_path / "surface.nc", "elevation", shelf)
    _write(tmp_path / "s1.nc", "thickness", _lens(500.0, 25e3))
    _write(tmp_path / "s2.nc", "thickness", _lens(300.0, 18e3))
    return tmp_path, shelf


def test_basin_command_writes_the_staged_result(stage_files, capsys):
    # the command must reproduce the library call on the same grids (common practice)
    folder, shelf = stage_files
    (folder / "delta.toml").write_text(
        """
[plate]
elastic_thickness = "8 km"

[basin]
surface_file = "surface.nc"
surface_variable = "elevation"

[[stages]]
file = "s1.nc"
variable = "thickness"
age = "3 Myr"
lithology = "shale"

[[stages]]
file = "s2.nc"
variable = "thickness"
age = "1 Ma"
lithology = "sandstone"
base_level = "0 m"

[output]
file = "delta_out.nc"
"""
    )
    assert main(["basin", str(folder / "delta.toml")]) == 0
    assert "wrote" in capsys.readouterr().out
    with xr.open_dataset(folder / "delta_out.nc") as ds:
        out = ds.load()
    stages = [
        Stage(_lens(500.0, 25e3), 3.0e6, "shale"),
        Stage(_lens(300.0, 18e3), 1.0e6, "sandstone", base_level=0.0),
    ]
    expected = stage_loading(stages, shelf, Plate(te=8e3))
    assert out.sizes["stage"] == 2
    for name in ("deflection", "accommodation", "stage_thickness", "stage_density"):
        assert_allclose(out[name].values, expected[name].values, rtol=1e-12, atol=1e-12)
    assert_allclose(out["age"].values, [3.0e6, 1.0e6])  # "3 Myr", "1 Ma" in years
    assert float(out["stage_fill"][1].max()) > 0.0  # the second stage filled its moat
    assert_allclose(out["stage_te"].values, [8e3, 8e3])  # every stage used [plate] te
    assert out.attrs["plate_te"] == 8e3


def test_backstrip_command(tmp_path):
    # same numbers as the library backstrip (Steckler & Watts 1978 formula in te = 0 limit
    # is tested in test_basin.py); common practice
    s, wd = _lens(4000.0, 30e3), _grid(np.full((N, N), 150.0))
    _write(tmp_path / "sed.nc", "thickness", s)
    _write(tmp_path / "water.nc", "depth", wd)
    (tmp_path / "strip.toml").write_text(
        """
[plate]
elastic_thickness = 0

[backstrip]
sediment_file = "sed.nc"
sediment_variable = "thickness"
water_file = "water.nc"
water_variable = "depth"
lithology = "shaly_sandstone"

[output]
file = "strip.nc"
"""
    )
    assert main(["basin", "-q", str(tmp_path / "strip.toml")]) == 0
    with xr.open_dataset(tmp_path / "strip.nc") as ds:
        out = ds.load()
    expected = backstrip(None, s, wd, Plate(te=0.0), lithology="shaly_sandstone")
    assert_allclose(
        out["tectonic_subsidence"].values, expected["tectonic_subsidence"].values, rtol=1e-12
    )


def test_basin_scenario_errors(stage_files, capsys):
    folder, _ = stage_files
    bad = folder / "bad.toml"
    bad.write_text(
        '[plate]\nelastic_thickness = 0\n[basin]\nsurface_file = "surface.nc"\n'
        'surface_variable = "elevation"\n[output]\nfile = "x.nc"\n'
    )
    assert main(["basin", str(bad)]) == 2
    assert "needs at least one [[stages]]" in capsys.readouterr().err
    bad.write_text(
        '[plate]\nelastic_thickness = 0\n[backstrip]\nsediment_file = "s1.nc"\n'
        'sediment_variable = "thickness"\n[output]\nfile = "x.nc"\n'
    )
    assert main(["basin", str(bad)]) == 2
    assert "at least two of basement_file" in capsys.readouterr().err
    bad.write_text(
        '[plate]\nelastic_thickness = 0\n[backstrip]\nsediment_file = "s1.nc"\n'
        'sediment_variable = "thickness"\nwater_file = "s2.nc"\n'
        'water_variable = "thickness"\n[output]\nfile = "x.nc"\n'
    )
    assert main(["run", str(bad)]) == 2
    assert "unknown table [backstrip]" in capsys.readouterr().err
    with pytest.raises(Exception, match="unknown key 'porosity'"):
        bad.write_text(
            '[plate]\nelastic_thickness = 0\n[basin]\nsurface_file = "a.nc"\n'
            'surface_variable = "e"\n[[stages]]\nfile = "s1.nc"\n'
            'variable = "thickness"\nage = 1\nporosity = 0.5\n[output]\nfile = "x.nc"\n'
        )
        load_basin_scenario(bad)


def test_layered_backstrip_command(tmp_path):
    # same numbers as the library's layered backstrip (checked against Steckler & Watts
    # 1978 in test_basin.py); common practice
    from gridflex.basin import backstrip_layers

    top, low = _lens(1500.0, 30e3), _lens(2500.0, 35e3)
    _write(tmp_path / "top.nc", "thickness", top)
    _write(tmp_path / "low.nc", "thickness", low)
    (tmp_path / "layers.toml").write_text(
        """
[plate]
elastic_thickness = "5 km"

[backstrip]

[[backstrip_layers]]
file = "top.nc"
lithology = "sandstone"
water_depth = "120 m"
age = 0

[[backstrip_layers]]
file = "low.nc"
lithology = "shale"
water_depth = "600 m"
sea_level_change = "40 m"
age = 10e6

[output]
file = "layers_out.nc"
"""
    )
    assert main(["basin", "-q", str(tmp_path / "layers.toml")]) == 0
    with xr.open_dataset(tmp_path / "layers_out.nc") as ds:
        out = ds.load()
    expected = backstrip_layers(
        [(top, "sandstone"), (low, "shale")],
        [120.0, 600.0],
        Plate(te=5e3),
        sea_level_changes=[0.0, 40.0],
    )
    assert out.sizes["step"] == 2
    assert_allclose(
        out["tectonic_subsidence"].values, expected["tectonic_subsidence"].values, rtol=1e-12
    )
    assert_allclose(out["age"].values, [0.0, 10e6])


def test_basin_command_reads_geotiffs_and_keeps_their_crs(tmp_path):
    # projected GeoTIFF inputs (north-up rasters, y decreasing) give the same numbers as
    # the grids themselves, and the NetCDF keeps the CRS (common practice)
    from gridflex.io.rasters import write_geotiff

    crs = "EPSG:32633"
    shelf = _grid(np.full((N, N), -600.0))
    stage = _lens(400.0, 25e3)
    write_geotiff(shelf, tmp_path / "surface.tif", crs)
    write_geotiff(stage, tmp_path / "stage.tif", crs)
    (tmp_path / "tif.toml").write_text(
        """
[plate]
elastic_thickness = "6 km"

[basin]
surface_file = "surface.tif"
isopachs = "present"

[[stages]]
file = "stage.tif"
age = 1e6

[output]
file = "tif_out.nc"
"""
    )
    assert main(["basin", "-q", str(tmp_path / "tif.toml")]) == 0
    with xr.open_dataset(tmp_path / "tif_out.nc") as ds:
        out = ds.load()
    expected = stage_loading([Stage(stage, 1e6)], shelf, Plate(te=6e3), isopachs="present")
    got = out["deflection"].isel(stage=0)
    got = got.sortby("y") if "y" in got.dims else got
    assert_allclose(got.values, expected["deflection"][0].values, rtol=1e-9, atol=1e-9)
    assert "crs" in out.variables or "spatial_ref" in out.variables
    # and GDAL reads that CRS from the NetCDF (CF grid mapping, issue 14)
    import rasterio
    from rasterio.crs import CRS

    with rasterio.open(f"netcdf:{tmp_path / 'tif_out.nc'}:deflection") as src:
        assert src.crs == CRS.from_string(crs)


@pytest.mark.parametrize("surface_kind", ["tif", "nc"])
def test_basin_mixes_a_north_up_geotiff_and_a_south_up_netcdf(tmp_path, surface_kind):
    # a north-up GeoTIFF (y decreasing, rasterio) and a south-up NetCDF (y increasing) of the
    # same cells are the same grid; the run equals the library call on the grids themselves
    # (common practice)
    from tests.helpers import write_both_orders

    shelf = _grid(np.broadcast_to(np.linspace(-400.0, 50.0, N), (N, N)).copy())
    stage = _lens(400.0, 25e3)
    surface_files = write_both_orders(tmp_path, "elevation", shelf)
    stage_files = write_both_orders(tmp_path, "thickness", stage)
    surface, stage_file = (
        (surface_files[0], stage_files[1])
        if surface_kind == "tif"
        else (surface_files[1], stage_files[0])
    )
    (tmp_path / "mixed.toml").write_text(
        f"""
[plate]
elastic_thickness = "6 km"

[basin]
surface_file = "{surface.name}"

[[stages]]
file = "{stage_file.name}"
age = 1e6

[output]
file = "mixed_out.nc"
"""
    )
    assert main(["basin", "-q", str(tmp_path / "mixed.toml")]) == 0
    with xr.open_dataset(tmp_path / "mixed_out.nc") as ds:
        out = ds.load()
    assert np.all(np.diff(out["y"].values) > 0)  # the documented order: y increasing
    expected = stage_loading([Stage(stage, 1e6)], shelf, Plate(te=6e3))
    assert_allclose(
        out["deflection"].isel(stage=0).values,
        expected["deflection"][0].values,
        rtol=1e-9,
        atol=1e-9,
    )


def test_basin_refuses_a_negative_isopach_naming_file_and_variable(stage_files, capsys):
    folder, _ = stage_files
    _write(folder / "neg.nc", "thickness", _lens(500.0, 25e3) - 10.0)
    (folder / "neg.toml").write_text(
        '[plate]\nelastic_thickness = 0\n[basin]\nsurface_file = "surface.nc"\n'
        'surface_variable = "elevation"\n[[stages]]\nfile = "neg.nc"\nvariable = "thickness"\n'
        'age = 1e6\n[output]\nfile = "x.nc"\n'
    )
    assert main(["basin", str(folder / "neg.toml")]) == 2
    err = capsys.readouterr().err
    # a thickness is never negative (common practice)
    assert "neg.nc: variable 'thickness':" in err and "below 0, down to -10" in err


MARGIN_BASIN = """
[plate]
youngs_modulus = "70 GPa"
{te}

[basin]
surface_file = "surface.nc"
surface_variable = "elevation"

[[stages]]
file = "s1.nc"
variable = "thickness"
age = 3.0e6

[[stages]]
file = "s2.nc"
variable = "thickness"
age = 1.0e6
lithology = "sandstone"
base_level = "20 m"
{stage_te}

[output]
file = "margin_out.nc"
"""

MARGIN_TABLES = """
[margin]
te_left = "15 km"
te_right = "4 km"
line = [[120000.0, -1.0], [120000.0, 300000.0]]
width = "30 km"

[[breaks]]
line = [[40000.0, 20000.0], [40000.0, 170000.0]]
"""


@pytest.mark.parametrize("stage_te", ["", 'elastic_thickness = "10 km"'])
def test_basin_with_a_margin_and_a_break(stage_files, stage_te):
    # [margin] and [[breaks]] make the te grid as in gridflex run (one builder), for the
    # plate and, with the breaks cut in, for a stage's own te; the command must give the
    # library call on the same grids (common practice). The shelf crosses sea level and
    # the second stage fills its moat with sediment to 20 m above it.
    from gridflex.te_maps import break_mask, margin_te

    folder, shelf = stage_files
    path = folder / "margin.toml"
    path.write_text(MARGIN_BASIN.format(te=MARGIN_TABLES, stage_te=stage_te))
    assert main(["basin", "-q", str(path)]) == 0
    with xr.open_dataset(folder / "margin_out.nc") as ds:
        out = ds.load()
    hinge = break_mask(shelf, [[[40e3, 20e3], [40e3, 170e3]]])
    te = margin_te(shelf, 15e3, 4e3, [[120e3, -1.0], [120e3, 300e3]], 30e3).where(~hinge, 0.0)
    second_te = te if not stage_te else _grid(np.full((N, N), 10e3)).where(~hinge, 0.0)
    stages = [
        Stage(_lens(500.0, 25e3), 3.0e6, "shale"),
        Stage(_lens(300.0, 18e3), 1.0e6, "sandstone", base_level=20.0, te=second_te),
    ]
    expected = stage_loading(stages, shelf, Plate(te=te, youngs_modulus=70e9))
    for name in ("deflection", "stage_fill", "water_depth"):
        assert_allclose(out[name].values, expected[name].values, atol=1e-9)
    assert_allclose(out["elastic_thickness"].values, [te.values, second_te.values])
    assert float(out["stage_fill"][1].max()) > 0.0
    # the [plate] te grid is plate_te only when every stage used it (common practice)
    assert out.attrs["plate_default_te_min" if stage_te else "plate_te_min"] == 0.0
    assert_allclose(out["stage_te_min"].values, [0.0, 0.0])  # the hinge
    assert_allclose(out["stage_te_max"].values[1], 10e3 if stage_te else 15e3)


def test_basin_te_file_and_its_errors_name_the_plate_table(stage_files, capsys):
    # [plate] elastic_thickness_file is read onto the surface's grid (as in gridflex run);
    # a bad one is reported against [plate], not [basin]; a bad [margin] against [margin]
    folder, shelf = stage_files
    _write(folder / "te.nc", "te", _grid(np.full((N, N), 9e3)))
    te_file = 'elastic_thickness_file = "te.nc"\nelastic_thickness_variable = "te"'
    path = folder / "te_file.toml"
    path.write_text(MARGIN_BASIN.format(te=te_file, stage_te=""))
    assert main(["basin", "-q", str(path)]) == 0
    with xr.open_dataset(folder / "margin_out.nc") as ds:
        assert_allclose(ds["elastic_thickness"].values, 9e3)
        assert ds.attrs["plate_te"] == "grid"
    path.write_text(MARGIN_BASIN.format(te=te_file.replace('"te"', '"nope"'), stage_te=""))
    assert main(["basin", "-q", "--overwrite", str(path)]) == 2
    err = capsys.readouterr().err
    assert "[plate] elastic_thickness_file" in err and "[basin]" not in err
    path.write_text(
        MARGIN_BASIN.format(te=MARGIN_TABLES.replace("[[120000.0, -1.0], ", "["), stage_te="")
    )
    assert main(["basin", "-q", "--overwrite", str(path)]) == 2
    err = capsys.readouterr().err
    assert "[margin]" in err and "[basin]" not in err


# a sea-level change loads every submerged cell up to the grid edge (expected)
@pytest.mark.filterwarnings("ignore::gridflex.errors.EdgeLoadWarning")
def test_sea_level_through_time_from_a_csv_file(stage_files, capsys):
    # each stage takes the sea level of the file at its age, linear in time between rows
    # (the one sea-level series rule, gridflex.glacial.ice.sea_level_at; common practice),
    # ages in Ma (1e6 years); a stage's own sea_level wins; the command must equal the
    # library call with those levels; ages outside the file are refused
    folder, shelf = stage_files
    (folder / "sea.csv").write_text("age [Ma],level [m]\n0,0\n2,30\n4,-10\n")
    text = """
[plate]
elastic_thickness = "8 km"

[basin]
surface_file = "surface.nc"
sea_level_file = "sea.csv"

[[stages]]
file = "s1.nc"
age = "3 Ma"

[[stages]]
file = "s2.nc"
age = "1 Myr"
lithology = "sandstone"
{own}

[output]
file = "sea_out.nc"
"""
    (folder / "sea.toml").write_text(text.format(own=""))
    assert main(["basin", "-q", str(folder / "sea.toml")]) == 0
    with xr.open_dataset(folder / "sea_out.nc") as ds:
        out = ds.load()
    stages = [
        Stage(_lens(500.0, 25e3), 3.0e6, "shale", sea_level=10.0),
        Stage(_lens(300.0, 18e3), 1.0e6, "sandstone", sea_level=15.0),
    ]
    expected = stage_loading(stages, shelf, Plate(te=8e3))
    for name in ("deflection", "water_depth"):
        assert_allclose(out[name].values, expected[name].values, rtol=1e-12, atol=1e-12)
    (folder / "sea.toml").write_text(text.format(own='sea_level = "-5 m"'))
    assert main(["basin", "-q", "--overwrite", str(folder / "sea.toml")]) == 0
    with xr.open_dataset(folder / "sea_out.nc") as ds:
        own = ds.load()
    stages[1] = Stage(_lens(300.0, 18e3), 1.0e6, "sandstone", sea_level=-5.0)
    expected = stage_loading(stages, shelf, Plate(te=8e3))
    assert_allclose(own["water_depth"].values, expected["water_depth"].values, atol=1e-12)
    (folder / "sea.csv").write_text("age [Ma],level [m]\n0,0\n2,30\n")
    assert main(["basin", "-q", "--overwrite", str(folder / "sea.toml")]) == 2
    err = capsys.readouterr().err
    assert "[basin] sea_level_file" in err and "not extrapolated" in err


def test_an_erosion_stage_reads_a_negative_isopach(stage_files):
    # erosion = true lets the isopach be negative (its cells erode the pile); the command
    # must equal the library call on the same grids (common practice); without the key the
    # same file is refused (test above)
    folder, shelf = stage_files
    _write(folder / "cut.nc", "thickness", _lens(-200.0, 18e3))
    (folder / "cut.toml").write_text(
        '[plate]\nelastic_thickness = "8 km"\n[basin]\nsurface_file = "surface.nc"\n'
        '[[stages]]\nfile = "s1.nc"\nage = "3 Ma"\n'
        '[[stages]]\nfile = "cut.nc"\nage = "1 Ma"\nerosion = true\n'
        '[output]\nfile = "cut_out.nc"\n'
    )
    assert main(["basin", "-q", str(folder / "cut.toml")]) == 0
    with xr.open_dataset(folder / "cut_out.nc") as ds:
        out = ds.load()
    stages = [Stage(_lens(500.0, 25e3), 3e6, "shale"), Stage(_lens(-200.0, 18e3), 1e6, "shale")]
    expected = stage_loading(stages, shelf, Plate(te=8e3))
    for name in ("deflection", "final_stage_thickness", "stage_thickness"):
        assert_allclose(out[name].values, expected[name].values, rtol=1e-12, atol=1e-12)
    assert float(out["deflection_increment"][1].min()) < 0.0  # the plate rebounds
    assert_allclose(out["stage_thickness"][1].values, _lens(-200.0, 18e3).values, atol=1e-12)
