"""Benchmark: gridflex.sweep (dask, local threads) against a plain loop of gridflex.engine.

Run: PYTHONPATH=. python tests/benchmarks/bench_sweep.py [n]
Prints both times and their ratio, measured in the same process (best of two).
"""

from __future__ import annotations

import sys
import time

import numpy as np
import xarray as xr

import gridflex


def main(n: int = 256) -> None:
    dx = 4e3
    x = (np.arange(n) - n / 2) * dx
    xx, yy = np.meshgrid(x, x)
    load = xr.DataArray(
        2e7 * np.exp(-(xx**2 + yy**2) / (2 * 25e3**2)), dims=("y", "x"), coords={"y": x, "x": x}
    )
    plate = gridflex.Plate(te=10e3)
    values = {"te": [5e3, 10e3, 15e3, 20e3], "infill_density": [0.0, 1030.0, 2400.0]}
    gridflex.sweep(load, plate, values)  # warm-up
    t_sweep = t_loop = float("inf")
    for _ in range(2):
        start = time.perf_counter()
        gridflex.sweep(load, plate, values)
        t_sweep = min(t_sweep, time.perf_counter() - start)
        start = time.perf_counter()
        for te in values["te"]:
            for rho in values["infill_density"]:
                gridflex.solve(load, gridflex.Plate(te, infill_density=rho))
        t_loop = min(t_loop, time.perf_counter() - start)
    print(f"grid {n}x{n}, 12 solves")
    print(f"sweep (threads)  {t_sweep:8.3f} s")
    print(f"loop of solve    {t_loop:8.3f} s")
    print(f"ratio loop/sweep = {t_loop / t_sweep:.2f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 256)
