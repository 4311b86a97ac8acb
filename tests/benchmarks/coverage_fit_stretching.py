"""Calibration check: how often does the 95 % fit_stretching interval contain the true beta?

Invented wells (beta uniform in 1.2-4, rift 60 Myr ago) with independent Gaussian noise
of 20 m on the McKenzie (1978) subsidence at a few ages; noise sigma known, or estimated
from each well's misfit; with and without a fitted offset. Each case is one column of one
call (every well is fitted on its own). Prints the coverage fractions (nominal 0.95) and
the largest relative error of beta.
Run: PYTHONPATH=. python tests/benchmarks/coverage_fit_stretching.py [wells]
"""

from __future__ import annotations

import sys
import warnings

import numpy as np

import gridflex
from gridflex.basin import mckenzie_subsidence
from gridflex.estimation.likelihood import OpenIntervalWarning


def main(wells: int = 2000) -> None:
    rng = np.random.default_rng(2026)
    truth = rng.uniform(1.2, 4.0, wells)
    for ages in (np.linspace(55e6, 0.0, 7), np.linspace(58e6, 0.0, 20)):
        curves = mckenzie_subsidence(truth, 60e6 - ages)["total_subsidence"].values.T
        for offset in (False, True):
            for sigma in (20.0, None):
                data = curves + rng.normal(0.0, 20.0, curves.shape)
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", OpenIntervalWarning)
                    fit = gridflex.fit_stretching(data, ages, 60e6, sigma=sigma, fit_offset=offset)
                low = fit["stretching_factor_lower"].values
                high = fit["stretching_factor_upper"].values
                inside = float(np.mean((low <= truth) & (truth <= high)))
                error = float(np.max(np.abs(fit["stretching_factor"].values / truth - 1)))
                print(
                    f"{ages.size:2d} ages, offset {offset!s:5}, sigma "
                    f"{'known    ' if sigma else 'estimated'}: coverage {inside:.3f}, "
                    f"largest beta error {error:.3%}"
                )


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 2000)
