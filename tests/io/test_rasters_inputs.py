"""Input rasters never reach the network or run code (io.rasters.read_raster).

A local listening socket stands in for a server: a refused input must not have
connected to it.
"""

from __future__ import annotations

import socket
from pathlib import Path

import numpy as np
import pytest
from affine import Affine

from gridflex.errors import InputError
from gridflex.io.rasters import read_raster
from tests.helpers import write_float32_geotiff

VRT = """<VRTDataset rasterXSize="4" rasterYSize="3">
  <SRS>EPSG:32633</SRS>
  <GeoTransform>500000, 1000, 0, 4000000, 0, -1000</GeoTransform>
  <VRTRasterBand dataType="Float32" band="1"{band_attrs}>
    {band}
    <SimpleSource>
      <SourceFilename relativeToVRT="{relative}">{source}</SourceFilename>
      <SourceBand>1</SourceBand>
    </SimpleSource>
  </VRTRasterBand>
</VRTDataset>
"""

PYTHON_PIXELS = (
    "<PixelFunctionType>double_it</PixelFunctionType>"
    "<PixelFunctionLanguage>Python</PixelFunctionLanguage>"
    "<PixelFunctionCode><![CDATA[\n"
    "def double_it(in_ar, out_ar, *args, **kwargs):\n"
    "    open('{marker}', 'w').write('ran')\n"
    "    out_ar[:] = 2 * in_ar[0]\n"
    "]]></PixelFunctionCode>"
)


def _vrt(path: Path, source: str, relative: int = 1, band: str = "", derived: bool = False):
    attrs = ' subClass="VRTDerivedRasterBand"' if derived else ""
    path.write_text(VRT.format(source=source, relative=relative, band=band, band_attrs=attrs))
    return path


@pytest.fixture
def server():
    """A listening TCP socket on localhost: (port, function telling whether anything
    connected)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        sock.listen(4)
        sock.settimeout(0.2)

        def connected() -> bool:
            try:
                conn, _ = sock.accept()
            except TimeoutError:
                return False
            conn.close()
            return True

        yield sock.getsockname()[1], connected


@pytest.fixture
def local_tif(tmp_path):
    values = np.arange(12.0).reshape(3, 4)
    return write_float32_geotiff(
        tmp_path / "local.tif", values, Affine(1000.0, 0.0, 500000.0, 0.0, -1000.0, 4000000.0)
    )


def test_a_vrt_of_a_local_file_is_read(tmp_path, local_tif):
    da = read_raster(_vrt(tmp_path / "ok.vrt", "local.tif"))
    np.testing.assert_array_equal(da.values, np.arange(12.0).reshape(3, 4))
    nested = _vrt(tmp_path / "nested.vrt", str(tmp_path / "ok.vrt"), relative=0)
    np.testing.assert_array_equal(read_raster(nested).values, da.values)


@pytest.mark.parametrize(
    "source",
    [
        "http://127.0.0.1:{port}/x.tif",
        "/vsicurl/http://127.0.0.1:{port}/x.tif",
        "/vsis3/bucket/x.tif",
        "vrt:///vsicurl/http://127.0.0.1:{port}/x.tif",
    ],
)
def test_a_vrt_with_a_network_source_is_refused_without_connecting(tmp_path, server, source):
    port, connected = server
    path = _vrt(tmp_path / "remote.vrt", source.format(port=port), relative=0)
    with pytest.raises(InputError, match=r"remote\.vrt: VRT source .*local files only"):
        read_raster(path)
    assert not connected()


def test_a_vrt_whose_local_source_has_a_network_source_is_refused(tmp_path, server):
    port, connected = server
    _vrt(tmp_path / "inner.vrt", f"/vsicurl/http://127.0.0.1:{port}/x.tif", relative=0)
    outer = _vrt(tmp_path / "outer.vrt", "inner.vrt")
    with pytest.raises(InputError, match=r"inner\.vrt: VRT source"):
        read_raster(outer)
    assert not connected()
    _vrt(tmp_path / "loop.vrt", "loop.vrt")
    with pytest.raises(InputError, match="refers back to a VRT"):
        read_raster(tmp_path / "loop.vrt")


def test_a_vrt_with_a_python_pixel_function_is_refused_and_runs_nothing(tmp_path, local_tif):
    marker = tmp_path / "ran.txt"
    band = PYTHON_PIXELS.format(marker=marker)
    path = _vrt(tmp_path / "code.vrt", "local.tif", band=band, derived=True)
    with pytest.raises(InputError, match=r"code\.vrt: the VRT has a pixel function in 'Python'"):
        read_raster(path)
    assert not marker.exists()


@pytest.mark.parametrize(
    "path", ["/vsicurl/http://127.0.0.1:{port}/x.tif", "https://127.0.0.1:{port}/x.nc"]
)
def test_a_url_or_network_path_as_the_input_is_refused(server, path):
    port, connected = server
    with pytest.raises(InputError, match="gridflex reads local files only"):
        read_raster(path.format(port=port))
    assert not connected()


def test_a_web_service_description_is_refused(tmp_path, server):
    port, connected = server
    wms = tmp_path / "service.xml"
    wms.write_text(
        "<GDAL_WMS><Service name='TMS'>"
        f"<ServerUrl>http://127.0.0.1:{port}/${{z}}/${{x}}/${{y}}.png</ServerUrl>"
        "</Service></GDAL_WMS>"
    )
    with pytest.raises(InputError, match=r"service\.xml: an XML <GDAL_WMS> description"):
        read_raster(wms)
    assert not connected()
