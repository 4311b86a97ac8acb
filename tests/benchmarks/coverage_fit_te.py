"""Calibration check: how often does the 95 % fit_te interval contain the true te?

Invented seamount load, Gaussian noise of 30 % of the peak deflection, either independent
per cell or smoothed (correlated over a few cells); with and without the residual
correlation correction. Prints the coverage fractions (nominal 0.95).
Run: PYTHONPATH=. python tests/benchmarks/coverage_fit_te.py [cases]
"""

from __future__ import annotations

import sys
import warnings

import numpy as np
import scipy.fft
from timing import gaussian_seamount_load

import gridflex


def main(cases: int = 100) -> None:
    n, dx, truth = 64, 8e3, 23.4e3
    load = gaussian_seamount_load(n, dx)
    plate = gridflex.Plate(te=truth)
    w = gridflex.solve(load, plate)["deflection"]
    k2 = np.add.outer(scipy.fft.fftfreq(n) ** 2, scipy.fft.rfftfreq(n) ** 2)
    for label, smoothing in (("independent", 0.0), ("correlated", 100.0)):
        for corrected in (False, True):
            rng = np.random.default_rng(2024)
            hits, n_eff = 0, []
            for _ in range(cases):
                noise = rng.standard_normal(w.shape)
                if smoothing:
                    noise = scipy.fft.irfft2(
                        scipy.fft.rfft2(noise) * np.exp(-k2 * smoothing), s=w.shape
                    )
                observed = w + 0.3 * float(w.max()) * noise / noise.std()
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", gridflex.GridflexWarning)
                    fit = gridflex.fit_te(
                        observed, load, plate, samples=15, correlated_residuals=corrected
                    )
                hits += fit.te_low <= truth <= fit.te_high
                n_eff.append(fit.n_effective)
            print(
                f"{label:11s} noise, correlation correction {str(corrected):5s}: coverage "
                f"{hits / cases:.3f} over {cases} cases, median n_eff {np.median(n_eff):.0f} "
                f"of {n * n}"
            )


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 100)
