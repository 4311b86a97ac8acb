"""Benchmark: self-consistent infill and model gravity against one FFT solve.

Run:  python tests/benchmarks/infill.py [--sizes 512 1024] [--repeat 2]

For each n^2 grid (1 km cells, an invented emergent island 4.9 km above a 4.5 km deep sea
floor, Te = 20 km, sediment to 300 m below the sea floor) it prints, measured in the same
process after a warm-up:
* the time of one spectral deflection on the padded working grid (the baseline),
* solve_with_infill (sediment to a level, and filling the whole moat) with Anderson
  acceleration and with the plain shifted iteration:
  iterations, total time, time / baseline and time per iteration / baseline,
* model_gravity (6 terms): time and time / one FFT pair of its padded grid,
* peak numpy memory (tracemalloc) of each step.
Timings are the best of --repeat runs; machines are noisy.
"""

from __future__ import annotations

import argparse
import tracemalloc

import numpy as np
import scipy.fft
import xarray as xr
from timing import best

from gridflex import Infill, Plate, load_from_elevation, model_gravity, solve_with_infill
from gridflex.gravity.interfaces import gravity_padded_shape
from gridflex.grid import check_grid
from gridflex.infill import spectral_inner

PLATE = Plate(te=20e3, youngs_modulus=70e9)
RULE = Infill(sediment="to_level", sediment_level=-4800.0)
RULES = {"sediment to level": RULE, "sediment full": Infill(sediment="full")}
DX = 1e3


def make_loads(n: int) -> xr.Dataset:
    x = (np.arange(n) - n / 2) * DX
    X, Y = np.meshgrid(x, x)
    h = 4900.0 * np.clip(1.0 - (X**2 + Y**2) / (n * DX / 10) ** 2, 0.0, None) ** 1.5
    elevation = xr.DataArray(-4500.0 + h, dims=("y", "x"), coords={"y": x, "x": x})
    return load_from_elevation(elevation, 2800.0, -4500.0)


def peak(func) -> float:
    tracemalloc.start()
    func()
    _, top = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return top / 2**20


def bench(n: int, repeat: int) -> None:
    loads = make_loads(n)
    spec = check_grid(loads["load"])
    rho_max = RULE.max_density()
    g = PLATE.gravity
    inner = spectral_inner(
        spec,
        float(PLATE.rigidity),
        (PLATE.mantle_density - rho_max / 2) * g,
        (PLATE.mantle_density - rho_max) * g,
    )
    rhs = np.zeros(inner.shape)
    rhs[inner.window] = loads["load"].values
    inner.solve(rhs)  # warm-up
    base, _ = best(lambda: inner.solve(rhs), repeat)
    print(f"n = {n}: working grid {inner.shape}, one spectral solve {base * 1e3:.1f} ms")
    for (label, rule), acceleration in (
        (item, acc) for item in RULES.items() for acc in ("anderson", "none")
    ):
        run = lambda acc=acceleration, rule=rule: solve_with_infill(  # noqa: E731
            loads, PLATE, infill=rule, acceleration=acc, tolerance=1e-4
        )
        run()
        elapsed, result = best(run, repeat)
        iterations = int(result.attrs["iterations"])
        print(
            f"  {label}, {acceleration:8s}: {iterations:3d} iterations, {elapsed:6.2f} s = "
            f"{elapsed / base:6.1f} solves ({elapsed / iterations / base:4.2f} per iteration), "
            f"balance {result.attrs['force_balance_residual']:.1e}, "
            f"peak {peak(run):.0f} MiB"
        )
    shape = gravity_padded_shape(spec, 4500.0 + 6000.0 + 2000.0 + 1000.0, 4.5)
    data = np.zeros(shape)
    spectrum = scipy.fft.rfft2(data, workers=-1)
    pair, _ = best(
        lambda: scipy.fft.irfft2(scipy.fft.rfft2(data, workers=-1), s=shape, workers=-1), repeat
    )
    del spectrum
    grav = lambda: model_gravity(result, observation_height=1000.0)  # noqa: E731
    grav()
    elapsed, _ = best(grav, repeat)
    print(
        f"  model_gravity: FFT grid {shape}, {elapsed:6.2f} s = {elapsed / pair:6.1f} FFT pairs, "
        f"peak {peak(grav):.0f} MiB"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[512, 1024])
    parser.add_argument("--repeat", type=int, default=2)
    args = parser.parse_args()
    for n in args.sizes:
        bench(n, args.repeat)


if __name__ == "__main__":
    main()
