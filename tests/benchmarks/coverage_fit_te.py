"""Calibration check: how often does the 95 % fit_te interval contain the true te?

Independent Gaussian noise, small invented grids; prints the coverage fraction.
Run: PYTHONPATH=. python tests/benchmarks/coverage_fit_te.py [cases]
"""

from __future__ import annotations

import sys
import warnings

import numpy as np
import xarray as xr

import gridflex


def main(cases: int = 100) -> None:
    n, dx, truth = 48, 8e3, 23.4e3
    x = (np.arange(n) - n / 2) * dx
    xx, yy = np.meshgrid(x, x)
    load = xr.DataArray(
        1770 * 9.81 * 3000 * np.exp(-(xx**2 + yy**2) / (2 * 20e3**2)),
        dims=("y", "x"),
        coords={"y": x, "x": x},
    )
    plate = gridflex.Plate(te=truth)
    w = gridflex.solve(load, plate)["deflection"]
    rng = np.random.default_rng(2024)
    hits = 0
    widths = []
    for _ in range(cases):
        observed = w + 0.3 * float(w.max()) * rng.standard_normal(w.shape)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", gridflex.GridflexWarning)
            fit = gridflex.fit_te(observed, load, plate, samples=15, correlated_residuals=False)
        hits += fit.te_low <= truth <= fit.te_high
        widths.append(fit.te_high / fit.te_low)
    print(
        f"{cases} cases: coverage {hits / cases:.3f} (nominal 0.95), "
        f"median te_high/te_low {np.median(widths):.3f}"
    )


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 100)
