"""Benchmark: fit_te (one shared load spectrum) against one gridflex.solve per trial Te.

Run: PYTHONPATH=. python tests/benchmarks/bench_fit_te.py [n]
Prints the time of both and their ratio, measured in the same process.
"""

from __future__ import annotations

import sys
import time

import numpy as np
from timing import gaussian_seamount_load

import gridflex


def main(n: int = 256) -> None:
    dx = 4e3
    load = gaussian_seamount_load(n, dx)
    plate = gridflex.Plate(te=23.4e3)
    w = gridflex.solve(load, plate)["deflection"]
    rng = np.random.default_rng(0)
    observed = w + 0.05 * float(w.max()) * rng.standard_normal(w.shape)

    fit = gridflex.fit_te(observed, load, plate)  # warm-up (imports, FFT plans)
    tes = fit.misfit["te"].values
    t_fit = t_base = float("inf")
    for _ in range(2):  # best of two, alternating
        start = time.perf_counter()
        fit = gridflex.fit_te(observed, load, plate)
        t_fit = min(t_fit, time.perf_counter() - start)
        start = time.perf_counter()
        for te in tes:  # baseline: a full solve (own padding, own load FFT) per trial te
            r = observed - gridflex.solve(load, plate.with_te(float(te)))["deflection"]
            float(((r - r.mean()) ** 2).sum())
        t_base = min(t_base, time.perf_counter() - start)
    print(f"grid {n}x{n}, {tes.size} trial te, FFT grid {tuple(fit.model.attrs['padded_shape'])}")
    print(f"fit_te total      {t_fit:8.3f} s  (te = {fit.te / 1e3:.3f} km)")
    print(f"solve per trial   {t_base:8.3f} s")
    print(f"ratio baseline/fit_te = {t_base / t_fit:.2f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 256)
