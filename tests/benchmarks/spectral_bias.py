"""Bias of fit_te_spectral on red topography, bare curve against the default.

Random topography with amplitude ~ k^-1.5 (power ~ k^-3, red like real topography) loads
a plate from above (infill = crust); its free-air anomaly is the first-order model of
PHYSICS.md eq. 6.2 applied to it. For each true te and seed the script fits the free-air
admittance twice: with the bare theoretical curve (the spectra's ``topography`` dropped,
which is what ``fit_te_spectral`` did by default before) and with the default, which
estimates the prediction from the data's own topography through the same tapers and bands.
Prints te and its error in percent. Then the Bouguer curves of Forsyth's two-load model
against load deconvolution (``gridflex.te_map`` with one window).
Run: PYTHONPATH=. python tests/benchmarks/spectral_bias.py [seeds]
"""

from __future__ import annotations

import sys
import warnings

import numpy as np
import scipy.fft
import xarray as xr

import gridflex
from gridflex.estimation.admittance import LeakageBiasWarning, free_air_admittance
from gridflex.gravity.first_order import CrustLayers

ROCK, WATER = 2800.0, 1030.0


def red_topography(n: int, dx: float, seed: int) -> xr.DataArray:
    """Invented topography (m), amplitude spectrum ~ k^-1.5, 800 m rms."""
    ky = 2 * np.pi * scipy.fft.fftfreq(n, dx)[:, None]
    kx = 2 * np.pi * scipy.fft.rfftfreq(n, dx)[None, :]
    k = np.hypot(ky, kx)
    rng = np.random.default_rng(seed)
    spectrum = rng.standard_normal(k.shape) + 1j * rng.standard_normal(k.shape)
    spectrum *= np.where(k > 0, k, np.inf) ** -1.5
    h = scipy.fft.irfft2(spectrum, s=(n, n))
    x = np.arange(n) * dx
    return xr.DataArray(800.0 * h / h.std(), dims=("y", "x"), coords={"y": x, "x": x})


def main(seeds: int = 4) -> None:
    n, dx = 256, 8e3
    layers = CrustLayers(seafloor_depth=4500.0, crust_thickness=6000.0, crust_density=ROCK)
    ky = 2 * np.pi * scipy.fft.fftfreq(n, dx)[:, None]
    kx = 2 * np.pi * scipy.fft.rfftfreq(n, dx)[None, :]
    k = np.hypot(ky, kx)
    print(f"{n}^2 cells of {dx / 1e3:.0f} km; te in km, error in % of the truth")
    print("truth  seed   bare (old default)    default (own spectrum)")
    for truth in (25e3, 50e3):
        plate = gridflex.Plate(te=truth, infill_density=ROCK)
        errors: dict[str, list[float]] = {"bare": [], "default": []}
        for seed in range(seeds):
            topography = red_topography(n, dx, seed)
            z = free_air_admittance(k, plate, layers, ROCK - WATER)
            anomaly = topography.copy(
                data=scipy.fft.irfft2(z * scipy.fft.rfft2(topography.values), s=(n, n))
            )
            spectra = gridflex.cross_spectra(topography, anomaly)
            options = {"gravity": layers, "topography_contrast": ROCK - WATER}
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", LeakageBiasWarning)
                bare = gridflex.fit_te_spectral(
                    spectra.drop_vars("topography"), plate, **options
                ).te
            default = gridflex.fit_te_spectral(spectra, plate, **options).te
            row = []
            for name, te in (("bare", bare), ("default", default)):
                errors[name].append(100 * (te / truth - 1))
                row.append(f"{te / 1e3:7.2f} ({errors[name][-1]:+6.1f} %)")
            print(f"{truth / 1e3:5.0f}  {seed:4d}   {row[0]}    {row[1]}")
        print(
            f"{truth / 1e3:5.0f}  range  {min(errors['bare']):+.1f} to {max(errors['bare']):+.1f} %"
            f"       {min(errors['default']):+.1f} to {max(errors['default']):+.1f} %"
        )


def bouguer(seeds: int) -> None:
    """Forsyth's (1985) two-load model (tests/helpers.two_load_plate, f = 1, 256² of 20 km):
    the analytic coherence and admittance curves with a fitted load ratio, against load
    deconvolution (gridflex.te_map with one window the size of the grid)."""
    from tests.helpers import two_load_plate

    plate = gridflex.Plate(te=0.0, crust_thickness=35e3)
    print("Bouguer, two loads: te in km (analytic coherence, analytic admittance, deconvolution)")
    for truth in (10e3, 25e3, 40e3):
        for seed in range(seeds):
            topography, anomaly = two_load_plate(truth, 256, 20e3, seed=seed, plate=plate)
            spectra = gridflex.cross_spectra(topography, anomaly)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", LeakageBiasWarning)
                coherence = gridflex.fit_te_spectral(spectra, plate, "bouguer_coherence").te
            admittance = gridflex.fit_te_spectral(
                spectra, plate, "bouguer_admittance", moho_depth=35e3
            ).te
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", gridflex.GridflexWarning)
                deconvolved = float(
                    gridflex.te_map(topography, anomaly, plate, window=256 * 20e3)["te"].item()
                )
            print(
                f"{truth / 1e3:5.0f}  {seed:4d}   "
                + "   ".join(
                    f"{te / 1e3:6.1f} ({100 * (te / truth - 1):+5.0f} %)"
                    for te in (coherence, admittance, deconvolved)
                )
            )


if __name__ == "__main__":
    count = int(sys.argv[1]) if len(sys.argv) > 1 else 4
    main(count)
    bouguer(count)
