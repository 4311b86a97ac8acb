"""Benchmark: spectral solve time against one rfft2 + irfft2 pair of the padded size.

Run:  python tests/benchmarks/spectral.py [--sizes 1024 2048 4096] [--big 8192]

For each load size n^2 (1 km cells, Te = 20 km, so about 4.5 alpha = 270 cells of
padding per side) it prints the time of one FFT pair of the padded grid, of a solve
with a new plate (transfer function built) and with the same plate again (transfer
function reused), all measured in the same process after a warm-up, their ratios,
and the peak memory of the solve (tracemalloc: numpy allocations). With --big N it
checks in a child process whether an N^2 load solves on this machine and reports
the child's peak RSS.
Timings are the best of --repeat runs; machines are noisy.
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import time
import tracemalloc

import numpy as np
import scipy.fft
import xarray as xr

from gridflex import Plate, solve
from gridflex.solvers.spectral import transfer_function

PLATE = Plate(te=20e3)
DX = 1e3


def make_load(n: int) -> xr.DataArray:
    coords = (np.arange(n) - n / 2) * DX
    load = xr.DataArray(np.zeros((n, n)), dims=("y", "x"), coords={"y": coords, "x": coords})
    r = n // 8
    load.values[n // 2 - r : n // 2 + r, n // 2 - r : n // 2 + r] = 2.0e7
    return load


def best(func, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return min(times)


def fft_pair(data: np.ndarray) -> None:
    """One forward and one inverse real FFT of *data* (the baseline)."""
    spectrum = scipy.fft.rfft2(data, workers=-1)
    scipy.fft.irfft2(spectrum, s=data.shape, workers=-1, overwrite_x=True)


def bench(n: int, repeat: int) -> None:
    load = make_load(n)
    result = solve(load, PLATE)  # warm-up: FFT plans and first-touch of memory
    shape = tuple(int(v) for v in result.attrs["padded_shape"])
    del result
    data = np.random.default_rng(0).standard_normal(shape)  # non-zero pages, like a real load
    pair = best(lambda: fft_pair(data), repeat)

    def new_plate() -> None:
        transfer_function.cache_clear()
        solve(load, PLATE)

    fresh = best(new_plate, repeat)
    solve(load, PLATE)
    again = best(lambda: solve(load, PLATE), repeat)
    transfer_function.cache_clear()
    tracemalloc.start()
    solve(load, PLATE)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(
        f"{n:>5}^2  padded {shape[0]}x{shape[1]}  fft pair {pair:6.3f} s  "
        f"new plate {fresh:6.3f} s (ratio {fresh / pair:4.2f})  "
        f"same plate {again:6.3f} s (ratio {again / pair:4.2f})  "
        f"peak {peak / 2**30:5.2f} GiB = {peak / (8 * shape[0] * shape[1]):3.1f} padded grids",
        flush=True,
    )


def big(n: int) -> None:
    code = (
        "import sys, time, resource; sys.path.insert(0, '.');"
        "from tests.benchmarks.spectral import make_load, PLATE; from gridflex import solve;"
        f"load = make_load({n}); t = time.perf_counter(); r = solve(load, PLATE);"
        "print(f'{time.perf_counter() - t:.1f} s', r.attrs['padded_shape'],"
        " resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20, 'GiB peak RSS')"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    status = "solved" if done.returncode == 0 else f"FAILED ({done.stderr.strip()[-300:]})"
    print(f"{n:>5}^2  {status}: {done.stdout.strip()}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[1024, 2048, 4096])
    parser.add_argument("--big", type=int, default=8192, help="0 to skip")
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    print(f"scipy {scipy.__version__}, numpy {np.__version__}, workers=-1")
    for n in args.sizes:
        bench(n, args.repeat)
    if args.big:
        big(args.big)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
    print(f"this process peak RSS {peak:.2f} GiB")


if __name__ == "__main__":
    main()
