"""Estimate te from an invented flexed sea floor, and from free-air admittance.

1. A synthetic island chain flexes a plate of te = 18 km; the observed sea floor around it
   (the edifices masked out) gets 5 % noise; fit_te finds te, its 95 % interval and the
   sea-floor depth (the fitted offset).
2. Random topography loads a plate from above; its free-air anomaly is computed with the
   same first-order model; te comes back from the multitaper admittance.

Run:  python examples/estimate_te.py [OUTPUT_DIR]
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import scipy.fft
import xarray as xr

import gridflex
from gridflex.estimation.admittance import cross_spectra, fit_te_spectral, free_air_admittance
from gridflex.gravity.first_order import CrustLayers
from gridflex.io.plots import plot_misfit, plot_spectral_fit
from gridflex.synthetic import empty_grid, island_chain_height

ROCK, WATER = 2800.0, 1030.0


def misfit_example(out_dir: Path) -> None:
    grid = empty_grid(rows=160, columns=192, spacing=4e3)
    height = island_chain_height(grid)
    load = gridflex.pressure_from_height(height, ROCK - WATER)
    plate = gridflex.Plate(te=18e3, infill_density=WATER)
    w = gridflex.solve(load, plate)["deflection"]
    rng = np.random.default_rng(42)
    sea_floor = -4500.0 - w + 0.05 * float(w.max()) * rng.standard_normal(w.shape)
    mask = height < 10.0  # compare only where there is no edifice
    fit = gridflex.fit_te(sea_floor, load, plate, quantity="surface", mask=mask)
    print(
        f"misfit: te = {fit.te / 1e3:.2f} km, 95 % interval "
        f"[{fit.te_low / 1e3:.2f}, {fit.te_high / 1e3:.2f}] km (truth 18), "
        f"sea floor at {fit.offset:.1f} m (truth -4500)"
    )
    print("wrote", plot_misfit(fit, out_dir / "misfit.png", overwrite=True))


def admittance_example(out_dir: Path) -> None:
    n, dx = 256, 8e3
    x = np.arange(n) * dx
    ky = 2 * np.pi * scipy.fft.fftfreq(n, dx)[:, None]
    kx = 2 * np.pi * scipy.fft.rfftfreq(n, dx)[None, :]
    k = np.hypot(ky, kx)
    rng = np.random.default_rng(7)
    spectrum = rng.standard_normal(k.shape) + 1j * rng.standard_normal(k.shape)
    spectrum *= np.where(k > 0, k, np.inf) ** -1.5  # red, like real topography
    h = scipy.fft.irfft2(spectrum, s=(n, n))
    h *= 800.0 / h.std()
    plate = gridflex.Plate(te=25e3, infill_density=ROCK)  # the crust fills the flexure
    layers = CrustLayers(seafloor_depth=4500.0, crust_thickness=6000.0, crust_density=ROCK)
    anomaly = scipy.fft.irfft2(
        free_air_admittance(k, plate, layers, ROCK - WATER) * scipy.fft.rfft2(h), s=(n, n)
    )
    coords = {"y": x, "x": x}
    topography = xr.DataArray(h, dims=("y", "x"), coords=coords)
    gravity = xr.DataArray(anomaly, dims=("y", "x"), coords=coords)
    spectra = cross_spectra(topography, gravity)
    fit = fit_te_spectral(
        spectra, plate, gravity=layers, topography_contrast=ROCK - WATER, topography=topography
    )
    print(f"admittance: te = {fit.te / 1e3:.2f} km (truth 25)")
    print("wrote", plot_spectral_fit(fit, out_dir / "admittance.png", overwrite=True))


if __name__ == "__main__":
    out = Path(sys.argv[1]) if len(sys.argv) > 1 else Path("estimate_te_output")
    out.mkdir(parents=True, exist_ok=True)
    misfit_example(out)
    admittance_example(out)
