"""Benchmark: reprojection and outlines against a spectral solve of the same working grid.

Run:  python tests/benchmarks/geo.py [--sizes 512 1024 2048] [--repeat 3]

For a longitude/latitude grid of n^2 cells (about 1 km cells near 20 S) it prints the
time to resample the load onto the local equal-area grid (bilinear), to resample the
deflection back, to trace the moat/zero/crest outlines and build the GeoJSON features,
and the time of the spectral solve on the working grid, with the ratios to the solve.
Timings are the best of --repeat runs, measured in the same process after a warm-up.
"""

from __future__ import annotations

import argparse

import numpy as np
import xarray as xr
from timing import best

from gridflex import Plate, solve
from gridflex.gis.geometry import (
    LONLAT,
    GridGeometry,
    local_projection,
    reproject_values,
    working_geometry,
)
from gridflex.io.vectors import outline_features

PLATE = Plate(te=15e3)


def run(n: int, repeat: int) -> None:
    step = 0.01
    lon = -150.0 + step * (np.arange(n) - n / 2 + 0.5)
    lat = -20.0 - step * (np.arange(n) - n / 2 + 0.5)
    src = GridGeometry.from_coords(lat, lon, LONLAT)
    r2 = (lon[None, :] + 150.0) ** 2 + (lat[:, None] + 20.0) ** 2
    q = 2.0e7 * np.exp(-r2 / (2 * (0.05 * n * step) ** 2))
    crs = local_projection(src)
    work = working_geometry(src, crs)
    wy, wx = work.coords()

    t_to, q_work = best(lambda: reproject_values(q, src, work), repeat)
    grid = xr.DataArray(np.nan_to_num(q_work), dims=("y", "x"), coords={"y": wy, "x": wx})
    t_solve, result = best(lambda: solve(grid, PLATE), repeat)
    w = result["deflection"].values
    t_back, _ = best(lambda: reproject_values(w, work, src), repeat)
    depth = 0.5 * float(w.max())
    t_lines, features = best(lambda: outline_features(result, crs, depth), repeat)
    print(
        f"n={n:5d} work={work.shape} solve {t_solve:7.3f} s | to local {t_to:7.3f} s "
        f"({t_to / t_solve:5.2f}x) | back {t_back:7.3f} s ({t_back / t_solve:5.2f}x) | "
        f"outlines {t_lines:7.3f} s ({t_lines / t_solve:5.2f}x), {len(features)} features"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[512, 1024, 2048])
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    run(128, 1)  # warm-up
    for n in args.sizes:
        run(n, args.repeat)


if __name__ == "__main__":
    main()
