"""Benchmark: layer compaction and a staged basin run against their natural baselines.

Run:  python tests/benchmarks/basin.py [--size 256] [--stages 3] [--repeat 3]

1. Vectorised Newton for the compacted base of a layer (gridflex.basin.compaction) on a
   size^2 grid, against one evaluation of the closed-form grain thickness on the same
   grid (the cost floor: Newton needs ~5 such evaluations) and against scipy's scalar
   brentq on 2,000 cells, scaled per cell.
2. A staged run (size^2 cells of 2 km, te 10 km, stages of an invented delta building
   onto a shelf, sediment filling each moat to sea level) against one
   solve_with_infill of the total load on the same grid; infill iterations per stage.
Timings are the best of --repeat runs in this process; machines are noisy.
"""

from __future__ import annotations

import argparse

import numpy as np
import xarray as xr
from scipy import optimize
from timing import best

from gridflex import Infill, Plate, load_from_layers, solve_with_infill
from gridflex.basin.compaction import compacted_base, grain_thickness
from gridflex.basin.staging import Stage, stage_loading


def compaction_bench(n: int, repeat: int) -> None:
    rng = np.random.default_rng(0)
    top = rng.uniform(0.0, 6000.0, (n, n))
    grains = rng.uniform(0.0, 2000.0, (n, n))
    t_newton = best(lambda: compacted_base(top, grains, "shale"), repeat)[0]
    t_closed = best(lambda: grain_thickness(top, top + grains, "shale"), repeat)[0]
    cells = 2000
    flat_top, flat_s = top.ravel()[:cells], grains.ravel()[:cells]

    def scalar() -> None:
        for z1, s in zip(flat_top, flat_s, strict=True):
            optimize.brentq(
                lambda b, z1=z1, s=s: grain_thickness(z1, b, "shale") - s,
                z1,
                z1 + s / 0.37 + 1.0,
                xtol=1e-9,
            )

    t_scalar = best(scalar, 1)[0] * (n * n) / cells
    print(
        f"compaction {n}x{n}: newton {t_newton:.4f} s = {t_newton / t_closed:.1f} x one "
        f"closed-form pass; scalar brentq (scaled) {t_scalar:.2f} s = "
        f"{t_scalar / t_newton:.0f} x newton"
    )


def staged_bench(n: int, count: int, repeat: int) -> None:
    dx = 2e3
    coord = (np.arange(n) - n / 2) * dx
    y, x = np.meshgrid(coord, coord, indexing="ij")
    shelf = xr.DataArray(-300.0 + 0.0 * x, dims=("y", "x"), coords={"y": coord, "x": coord})
    stages = []
    for i in range(count):
        r2 = ((x + 60e3 - 25e3 * i) ** 2 + y**2) / (40e3) ** 2
        h = xr.DataArray(
            300.0 * np.exp(-r2) * (r2 < 9), dims=("y", "x"), coords={"y": coord, "x": coord}
        )
        stages.append(Stage(h, 3e6 - 1e6 * i, "shale", base_level=0.0))
    plate = Plate(te=10e3)
    result = {}

    def staged() -> None:
        result["out"] = stage_loading(stages, shelf, plate, compaction=False)

    t_staged = best(staged, repeat)[0]
    rho = 1030 * 0.63 + 2720 * 0.37
    column = load_from_layers(shelf, [(s.thickness, rho) for s in stages])
    infill = Infill(sediment="to_level", sediment_level=0.0, sediment_density=rho)
    t_total = best(lambda: solve_with_infill(column, plate, infill=infill), repeat)[0]
    iterations = result["out"]["iterations"].values.tolist()
    print(
        f"staged {n}x{n}, {count} stages: {t_staged:.3f} s = {t_staged / t_total:.2f} x one "
        f"infill solve of the total ({t_total:.3f} s); iterations per stage {iterations}"
    )
    t_comp = best(lambda: stage_loading(stages, shelf, plate), repeat)[0]
    print(f"  with compaction: {t_comp:.3f} s = {t_comp / t_total:.2f} x")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--size", type=int, default=256)
    parser.add_argument("--stages", type=int, default=3)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    compaction_bench(4 * args.size, args.repeat)
    staged_bench(args.size, args.stages, args.repeat)


if __name__ == "__main__":
    main()
