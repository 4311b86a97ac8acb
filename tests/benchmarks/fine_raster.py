"""A fine raster end to end: an invented 30 m DEM of a few edifices, te 20 km.

Writes an n x n float32 GeoTIFF (projected CRS, 30 m cells), then times, in this process,
the baseline: rasterio reading it and writing one float32 GeoTIFF, and xarray writing one
float32 NetCDF variable of its size (both compressed like gridflex's writers). Then it runs
``gridflex run`` on it in a child process (outputs on the input grid, ``dtype =
"float32"``, a deflection GeoTIFF) and prints its time against the baseline and the child's
peak memory (from its rusage). Machines are noisy: compare ratios, not seconds.

    python tests/benchmarks/fine_raster.py --size 8000
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import rasterio
import xarray as xr
from affine import Affine

CELL = 30.0
CRS = "EPSG:32633"


def write_dem(path: Path, n: int) -> None:
    """Invented elevations (m): a few Gaussian edifices on a flat plain, row by row."""
    rng = np.random.default_rng(11)
    centres = rng.uniform(0.3, 0.7, (4, 2)) * n * CELL
    widths = rng.uniform(2e3, 6e3, 4)
    heights = rng.uniform(500.0, 1500.0, 4)
    x = (np.arange(n) + 0.5) * CELL
    profile = {
        "driver": "GTiff",
        "width": n,
        "height": n,
        "count": 1,
        "dtype": "float32",
        "crs": CRS,
        "transform": Affine(CELL, 0.0, 400e3, 0.0, -CELL, 5.0e6),
        "tiled": True,
        "compress": "deflate",
    }
    with rasterio.open(path, "w", **profile) as dst:
        step = 512
        for start in range(0, n, step):
            rows = np.arange(start, min(n, start + step))
            y = (rows + 0.5)[:, None] * CELL
            block = np.zeros((rows.size, n), dtype=np.float32)
            for (cx, cy), width, height in zip(centres, widths, heights, strict=True):
                block += (
                    height * np.exp(-((x - cx) ** 2 + (y - cy) ** 2) / (2 * width**2))
                ).astype(np.float32)
            dst.write(block, 1, window=((start, start + rows.size), (0, n)))


def baseline(source: Path, folder: Path) -> float:
    """Seconds to read the raster and write it as one GeoTIFF and one NetCDF (float32)."""
    start = time.perf_counter()
    with rasterio.open(source) as src:
        values = src.read(1)
        profile = src.profile
    with rasterio.open(folder / "copy.tif", "w", **profile) as dst:
        dst.write(values, 1)
    n = values.shape[0]
    coords = {"y": np.arange(n) * CELL, "x": np.arange(n) * CELL}
    xr.Dataset({"v": (("y", "x"), values)}, coords=coords).to_netcdf(
        folder / "copy.nc", engine="netcdf4", encoding={"v": {"zlib": True, "complevel": 4}}
    )
    return time.perf_counter() - start


SCENARIO = """
[plate]
elastic_thickness = "20 km"

[[loads]]
file = "dem.tif"
kind = "thickness"
density = 2600
displaced_density = 0

[output]
file = "out/result.nc"
geotiff = ["deflection"]
dtype = "float32"
"""


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=8000, help="cells per side")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        write_dem(folder / "dem.tif", args.size)
        base = min(baseline(folder / "dem.tif", folder) for _ in range(2))
        (folder / "s.toml").write_text(SCENARIO)
        start = time.perf_counter()
        done = subprocess.run(
            [sys.executable, "-m", "gridflex", "run", "s.toml", "-v"],
            cwd=folder,
            capture_output=True,
            text=True,
        )
        elapsed = time.perf_counter() - start
        peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 2**20  # KiB -> GiB
        if done.returncode != 0:
            print(done.stderr)
            raise SystemExit(done.returncode)
        rule = [line for line in done.stderr.splitlines() if "working cells" in line]
    print(f"{args.size} x {args.size} float32 GeoTIFF of {CELL:g} m cells, te 20 km")
    print(f"baseline (read + one GeoTIFF + one NetCDF variable): {base:7.2f} s")
    print(f"gridflex run (child process):                        {elapsed:7.2f} s")
    print(f"ratio run / baseline = {elapsed / base:.2f} (target <= 4)")
    print(f"child peak memory = {peak:.2f} GiB (target < 4)")
    for line in rule:
        print(line)


if __name__ == "__main__":
    main()
