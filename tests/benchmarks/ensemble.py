"""Benchmark: gridflex.ensemble against the same solves run one after another.

Run: PYTHONPATH=. python tests/benchmarks/ensemble.py [n] [members] [scheduler]

A constant-te plate under a Gaussian load on an n x n grid of 2 km cells (512 and
400 by default); te ~ Normal(30 km, 4 km) and a load scale ~ Uniform(0.8, 1.2). The
baseline is one gridflex.solve per member (with the member's te and load scale) in a
plain loop; the ensemble computes the same members and their statistics (mean, std,
5/50/95 % quantiles, two exceedance maps). Both run in this process, interleaved; the
ratio is ensemble / loop (issue 19 target: at most 1.2). The machine is shared: the
median and range of three pairs are printed.
"""

from __future__ import annotations

import statistics
import sys
import time

import numpy as np
import scipy.stats
import xarray as xr

import gridflex
from gridflex.sweeps.monte_carlo import draw_samples


def main(n: int = 512, members: int = 400, scheduler: str | None = None) -> None:
    dx = 2e3
    x = (np.arange(n) - n / 2) * dx
    xx, yy = np.meshgrid(x, x)
    load = xr.DataArray(
        2.5e7 * np.exp(-(xx**2 + yy**2) / (2 * (n * dx / 12) ** 2)),
        dims=("y", "x"),
        coords={"y": x, "x": x},
    )
    plate = gridflex.Plate(te=30e3)
    spread = {"te": scipy.stats.norm(30e3, 4e3), "load_scale": scipy.stats.uniform(0.8, 0.4)}
    samples = draw_samples(spread, members, seed=1)
    peak = float(load.max())
    thresholds = [0.3 * peak / 3300 / 9.81, 0.6 * peak / 3300 / 9.81]

    def run_ensemble() -> xr.Dataset:
        return gridflex.ensemble(
            load, plate, spread, members=members, seed=1, thresholds=thresholds, scheduler=scheduler
        )

    def run_loop() -> None:
        for te, scale in zip(samples["te"], samples["load_scale"], strict=True):
            gridflex.solve(load * scale, plate.with_te(float(te)))

    gridflex.solve(load, plate)  # warm-up (imports, FFT plans)
    run_ensemble()
    ratios, t_ens, t_loop = [], [], []
    for _ in range(3):
        start = time.perf_counter()
        out = run_ensemble()
        t_ens.append(time.perf_counter() - start)
        start = time.perf_counter()
        run_loop()
        t_loop.append(time.perf_counter() - start)
        ratios.append(t_ens[-1] / t_loop[-1])
    # the ensemble's first member against its own solve: same physics
    w = gridflex.solve(
        load * float(samples["load_scale"][0]), plate.with_te(float(samples["te"][0]))
    )
    print(f"grid {n}x{n}, {members} members, scheduler {scheduler or 'threads'}")
    print(f"ensemble      {', '.join(f'{t:.2f}' for t in t_ens)} s")
    print(f"loop of solve {', '.join(f'{t:.2f}' for t in t_loop)} s")
    print(
        f"ratio ensemble/loop: median {statistics.median(ratios):.3f} "
        f"(range {min(ratios):.3f}-{max(ratios):.3f}); target <= 1.2"
    )
    mean = out["mean"].sel(quantity="deflection")
    std = out["std"].sel(quantity="deflection").values.flat[int(np.argmax(mean.values))]
    print(
        f"mean peak {float(mean.max()):.1f} m, std at the peak {float(std):.1f} m, "
        f"one member's solve peak {float(w['deflection'].max()):.1f} m"
    )


if __name__ == "__main__":
    args = sys.argv[1:]
    main(
        int(args[0]) if args else 512,
        int(args[1]) if len(args) > 1 else 400,
        args[2] if len(args) > 2 else None,
    )
