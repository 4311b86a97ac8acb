"""``gridflex temap`` (gridflex.workflows.temap): real files in, real files out."""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
import xarray as xr
from numpy.testing import assert_allclose

import gridflex
from gridflex.cli.main import main
from gridflex.io.netcdf import read_result
from gridflex.io.rasters import write_geotiff
from tests.helpers import two_load_plate

N, DX, TE = 128, 30e3, 20e3
CRS = "EPSG:32633"

SCENARIO = """
[plate]
crust_thickness = "35 km"

[data]
topography_file = "topography.tif"
anomaly_file = "bouguer.nc"
anomaly_variable = "bouguer"

[temap]
window = "2400 km"
step = "1200 km"
samples = 12
{extra}
[output]
file = "out/te.nc"
"""


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    """Forsyth's (1985) two-load model on a uniform 20 km plate (tests/helpers), the
    topography as a GeoTIFF in UTM 33N, the Bouguer anomaly (mGal) as NetCDF."""
    folder = tmp_path_factory.mktemp("temap")
    plate = gridflex.Plate(te=0.0, crust_thickness=35e3)
    topography, bouguer = two_load_plate(TE, N, DX, seed=4, plate=plate)
    shift = {"x": topography["x"] + 300e3, "y": topography["y"] + 4.5e6}
    topography = topography.assign_coords(shift).assign_attrs(units="m")
    bouguer = bouguer.assign_coords(shift).assign_attrs(units="mGal")
    write_geotiff(topography.rename("topography"), folder / "topography.tif", CRS)
    xr.Dataset({"bouguer": bouguer}).to_netcdf(folder / "bouguer.nc")
    return folder


def test_temap_writes_netcdf_geotiff_and_map(inputs, capsys):
    (inputs / "s.toml").write_text(SCENARIO.format(extra=""))
    assert main(["temap", str(inputs / "s.toml"), "--overwrite"]) == 0
    out = capsys.readouterr().out
    assert "te map: 4 windows of 2400 km" in out and "wrote" in out
    result = read_result(inputs / "out" / "te.nc")
    assert result["te"].shape == (2, 2)
    assert "PROJCS" in result.attrs["crs_wkt"] or "PROJCRS" in result.attrs["crs_wkt"]
    # synthetic recovery, Forsyth (1985) two-load model: within 25 % (issue 19 target)
    assert_allclose(result["te"].values, TE, rtol=0.25)
    assert np.all(result["te_low"].values <= result["te"].values)
    assert np.all(result["te"].values <= result["te_high"].values)
    assert result.attrs["quantity"] == "bouguer" and " temap s.toml" in result.attrs["history"]
    with rasterio.open(inputs / "out" / "te_te.tif") as src:
        assert src.crs.to_epsg() == 32633
        band = src.read(1)
    # the GeoTIFF is north-up: its first row is the map's northern row
    north_first = result["te"].sortby("y", ascending=False).values
    assert_allclose(band, north_first, rtol=1e-6)
    assert (inputs / "out" / "te_te.png").stat().st_size > 5000


def test_temap_refusals(inputs, capsys):
    (inputs / "f.toml").write_text(SCENARIO.format(extra='quantity = "free_air"\n'))
    assert main(["temap", str(inputs / "f.toml")]) == 2
    assert "[temap] seafloor_depth: required for quantity 'free_air'" in capsys.readouterr().err
    (inputs / "w.toml").write_text(SCENARIO.format(extra='te_min = "90 km"\nte_max = "20 km"\n'))
    assert main(["temap", str(inputs / "w.toml")]) == 2
    assert "[temap] te_min: must be less than te_max" in capsys.readouterr().err
    (inputs / "big.toml").write_text(SCENARIO.replace('"2400 km"', '"9000 km"').format(extra=""))
    assert main(["temap", str(inputs / "big.toml"), "--overwrite"]) == 2
    assert "window" in capsys.readouterr().err


def test_temap_fan_wavelet(inputs, capsys):
    """``method = "fan_wavelet"`` reaches :func:`gridflex.te_map`: the same centres, the
    method in the file's attributes; synthetic recovery of Forsyth's (1985) two-load
    model on the uniform 20 km plate within 25 % (issue 19 target; Kirby & Swain 2011
    for the method), the median of the four points."""
    extra = 'method = "fan_wavelet"\nwindow = "1200 km"\n'
    text = SCENARIO.replace('window = "2400 km"\n', "").format(extra=extra)
    text = text.replace('file = "out/te.nc"', 'file = "fw/te.nc"')
    (inputs / "fw.toml").write_text(text)
    assert main(["temap", str(inputs / "fw.toml"), "--overwrite"]) == 0
    result = read_result(inputs / "fw" / "te.nc")
    assert "fan wavelet" in result.attrs["method"]
    assert_allclose(np.median(result["te"].values), TE, rtol=0.25)
    (inputs / "ff.toml").write_text(
        text.replace(
            "[output]",
            'quantity = "free_air"\n'
            'seafloor_depth = "4 km"\ntopography_contrast = "1670 kg/m3"\n[output]',
        )
    )
    assert main(["temap", str(inputs / "ff.toml"), "--overwrite"]) == 2
    assert "fits quantity 'bouguer' only" in capsys.readouterr().err
    (inputs / "fb.toml").write_text(text.replace("[output]", "bandwidth = 3.0\n[output]"))
    assert main(["temap", str(inputs / "fb.toml"), "--overwrite"]) == 2
    assert "[temap]" in (err := capsys.readouterr().err) and "bandwidth and tapers" in err


def test_temap_jackknife_and_prewhiten_keys_reach_the_map(inputs, capsys):
    """``jackknife = false`` leaves the misfit interval alone, which the jackknife's is
    never narrower than (both added in quadrature; Thomson & Chave 1991 for the
    jackknife); ``prewhiten = false`` changes the estimate."""
    outputs = {}
    for name, extra in (
        ("default", ""),
        ("nojack", "jackknife = false\n"),
        ("raw", "prewhiten = false\n"),
    ):
        text = SCENARIO.format(extra=extra).replace('file = "out/te.nc"', f'file = "{name}/te.nc"')
        (inputs / f"{name}.toml").write_text(text)
        assert main(["temap", str(inputs / f"{name}.toml"), "--overwrite"]) == 0
        outputs[name] = read_result(inputs / name / "te.nc")
    default, nojack, raw = outputs["default"], outputs["nojack"], outputs["raw"]
    assert_allclose(nojack["te"].values, default["te"].values)
    width = (default["te_high"] - default["te_low"]).values
    misfit_only = (nojack["te_high"] - nojack["te_low"]).values
    assert np.all(misfit_only <= width * (1 + 1e-9)) and np.any(misfit_only < width)
    assert not np.allclose(raw["te"].values, default["te"].values)
    assert default.attrs["interval"] != nojack.attrs["interval"]
