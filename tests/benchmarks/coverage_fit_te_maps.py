"""Calibration check: how often do the 95 % intervals of fit_te_margin contain the truth?

A margin (te 10 km west of x = 0, 40 km east, 30 km transition) under two invented seamounts,
one on each side, on a periodic 48 x 48 grid of 8 km cells (periodic only to keep each
finite-difference solve cheap: the statistics do not depend on the edges); independent
Gaussian noise of 20 % of the peak deflection, a new draw per case. Prints, per parameter,
the share of cases whose interval holds the truth (nominal 0.95: each interval is a
one-parameter profile-likelihood interval), and the forward models per fit.
Run: PYTHONPATH=. python tests/benchmarks/coverage_fit_te_maps.py [cases]
"""

from __future__ import annotations

import sys
import time
import warnings

import numpy as np
from timing import margin_seamounts_load

import gridflex
from gridflex.te_maps import margin_te


def main(cases: int = 40) -> None:
    n, dx = 48, 8e3
    load = margin_seamounts_load(n, dx)
    line, width, truth = [(0.0, 0.0), (0.0, 1.0)], 30e3, {"te_left": 10e3, "te_right": 40e3}
    w = gridflex.solve(
        load, gridflex.Plate(te=margin_te(load, 10e3, 40e3, line, width)), edges="periodic"
    )["deflection"]
    rng = np.random.default_rng(2024)
    hits = dict.fromkeys(truth, 0)
    models, start = [], time.perf_counter()
    for _ in range(cases):
        observed = w + 0.2 * float(w.max()) * rng.standard_normal(w.shape)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", gridflex.GridflexWarning)
            fit = gridflex.fit_te_margin(
                observed,
                load,
                gridflex.Plate(te=0.0),
                line,
                width,
                bounds=(2e3, 1.5e5),
                edges="periodic",
            )
        for name, value in truth.items():
            estimate = fit.estimates[name]
            hits[name] += estimate.low <= value <= estimate.high
        models.append(fit.forward_models)
    for name in truth:
        print(f"{name:9s}: coverage {hits[name] / cases:.3f} over {cases} cases")
    print(
        f"forward models per fit: median {np.median(models):.0f}, max {max(models)}; "
        f"{(time.perf_counter() - start) / cases:.1f} s per fit"
    )


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 40)
