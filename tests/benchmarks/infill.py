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

Then, for each --te-sizes n^2 grid (cells of --te-spacing), the same island on a te grid
(an invented margin, 30 km -> 8 km across a line, and a hinge line with te = 0) solved by
finite differences, sediment to a level, filling the whole moat, and water only:
outer iterations, total conjugate-gradient iterations and time, against one
finite-difference solve of the same solve grid (set-up included, default tolerance, same
operator stiffness and margin) and against one ``gridflex.solve`` of the plate.
Timings are the best of --repeat runs; machines are noisy, iteration counts are not.
"""

from __future__ import annotations

import argparse
import tracemalloc

import numpy as np
import scipy.fft
import xarray as xr
from timing import best

from gridflex import Infill, Plate, load_from_elevation, model_gravity, solve, solve_with_infill
from gridflex.gravity.interfaces import gravity_padded_shape
from gridflex.grid import check_grid
from gridflex.infill import spectral_inner
from gridflex.solvers.finite_difference import FiniteDifferenceSolver
from gridflex.te_maps import break_mask, broken_te, margin_te

PLATE = Plate(te=20e3, youngs_modulus=70e9)
RULE = Infill(sediment="to_level", sediment_level=-4800.0)
RULES = {"sediment to level": RULE, "sediment full": Infill(sediment="full")}
DX = 1e3


def make_loads(n: int, dx: float = DX) -> xr.Dataset:
    x = (np.arange(n) - n / 2) * dx
    X, Y = np.meshgrid(x, x)
    h = 4900.0 * np.clip(1.0 - (X**2 + Y**2) / (n * dx / 10) ** 2, 0.0, None) ** 1.5
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


def shape_of(result: xr.Dataset) -> tuple[int, ...]:
    """The working (padded) shape a result records."""
    return tuple(int(v) for v in result.attrs["padded_shape"])


def margin_plate(like: xr.DataArray) -> Plate:
    """te 30 km -> 8 km across a line an eighth of the width east of the centre (over an
    eighth of the width), and a hinge (te = 0) a quarter of the width west of it."""
    width = float(like["x"].max() - like["x"].min())
    te = margin_te(like, 30e3, 8e3, [[width / 8, -width], [width / 8, width]], width / 8)
    hinge = break_mask(like, [[[-width / 4, -width / 3], [-width / 4, width / 3]]])
    return PLATE.with_te(broken_te(te, hinge))


def bench_te_grid(n: int, dx: float, repeat: int) -> None:
    loads = make_loads(n, dx)
    like = loads["load"]
    plate = margin_plate(like)
    spec = check_grid(like)
    rigidity = np.asarray(plate.rigidity.values)
    g = plate.gravity
    values = np.asarray(like.values)
    one = lambda: solve(like, plate)  # noqa: E731
    one()
    base_solve, plain = best(one, repeat)
    print(
        f"te grid n = {n} ({dx / 1e3:g} km cells): one gridflex.solve {base_solve:.2f} s, "
        f"{plain.attrs['iterations']} CG iterations on {shape_of(plain)}"
    )
    for label, rule in (*RULES.items(), ("water only", Infill())):
        rho_max = rule.max_density()
        stiffness = (plate.mantle_density - rho_max / 2) * g
        pad = (plate.mantle_density - rho_max) * g

        def fd_once(stiffness: float = stiffness, pad: float = pad) -> dict:
            solver = FiniteDifferenceSolver.build(
                spec, rigidity, stiffness, plate.poisson_ratio, pad_stiffness=pad
            )
            return solver.solve(values)[1]

        base, info = best(fd_once, repeat)
        run = lambda rule=rule: solve_with_infill(loads, plate, infill=rule)  # noqa: E731
        elapsed, result = best(run, repeat)
        inner = int(result.attrs["inner_iterations"])
        print(
            f"  {label}: solve grid {shape_of(result)}, one FD solve "
            f"{base:.2f} s ({info['iterations']} CG, set-up {info['setup_seconds']:.2f} s); "
            f"infill {int(result.attrs['iterations'])} outer, {inner} CG in "
            f"{int(result.attrs['inner_solves'])} solves, {elapsed:.2f} s = "
            f"{elapsed / base:.2f} FD solves ({inner / info['iterations']:.2f} in CG "
            f"iterations) = {elapsed / base_solve:.2f} gridflex.solve"
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="*", default=[512, 1024])
    parser.add_argument("--te-sizes", type=int, nargs="*", default=[256])
    parser.add_argument("--te-spacing", type=float, default=2e3, help="m")
    parser.add_argument("--repeat", type=int, default=2)
    args = parser.parse_args()
    for n in args.sizes:
        bench(n, args.repeat)
    for n in args.te_sizes:
        bench_te_grid(n, args.te_spacing, args.repeat)


if __name__ == "__main__":
    main()
