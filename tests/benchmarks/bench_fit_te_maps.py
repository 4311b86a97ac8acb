"""Benchmark: fit_te_margin (with and without the line's position) and fit_te_scale.

Run: PYTHONPATH=. python tests/benchmarks/bench_fit_te_maps.py [n]
A margin (te 10 km west of x = 0, 40 km east) under two invented seamounts on an n x n grid
of 6 km cells, infinite edges, 5 % noise. Prints, per fit, the forward models (plate solves,
the number to watch: timings on a shared machine are noisy), the fit's time and its ratio to
the time of one finite-difference solve of the true map, measured in the same process.
"""

from __future__ import annotations

import sys
import time

import numpy as np
from timing import best, margin_seamounts_load

import gridflex
from gridflex.te_maps import margin_te


def main(n: int = 64) -> None:
    dx = 6e3
    load = margin_seamounts_load(n, dx)
    line, width = [(0.0, 0.0), (0.0, 1.0)], 30e3
    te = margin_te(load, 10e3, 40e3, line, width)
    one, result = best(lambda: gridflex.solve(load, gridflex.Plate(te=te)), 3)
    w = result["deflection"]
    observed = w + 0.05 * float(w.max()) * np.random.default_rng(1).standard_normal(w.shape)
    plate = gridflex.Plate(te=0.0)
    shape = margin_te(load, 8e3, 30e3, line, width)
    shifted = [(10e3, 0.0), (10e3, 1.0)]
    fits = {
        "margin": lambda: gridflex.fit_te_margin(
            observed, load, plate, line, width, bounds=(3e3, 8e4)
        ),
        "margin + line": lambda: gridflex.fit_te_margin(
            observed,
            load,
            plate,
            shifted,
            width,
            bounds=(3e3, 8e4),
            line_shift_bounds=(-40e3, 40e3),
        ),
        "scale": lambda: gridflex.fit_te_scale(
            observed, load, gridflex.Plate(te=shape), bounds=(0.3, 3.0)
        ),
    }
    print(f"grid {n}x{n}, one finite-difference solve {one:.3f} s")
    for name, run in fits.items():
        start = time.perf_counter()
        fit = run()
        seconds = time.perf_counter() - start
        values = ", ".join(
            f"{key} {e.value:.4g} [{e.low:.4g}, {e.high:.4g}]" for key, e in fit.estimates.items()
        )
        print(
            f"{name:14s} {fit.forward_models:3d} forward models, {seconds:7.2f} s, "
            f"ratio fit / one solve = {seconds / one:5.1f}; {values}"
        )


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 64)
