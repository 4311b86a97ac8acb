"""Pictures of results (matplotlib, PNG, written atomically).

matplotlib is imported with the non-interactive Agg backend inside each function
so that importing gridflex never opens a window.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import xarray as xr

from .io.atomic import atomic_path

if TYPE_CHECKING:  # type hints only: plots sits below fitting in the import floors
    from .fitting import TeFit
    from .spectra import SpectralFit

__all__ = ["plot_deflection_map", "plot_misfit", "plot_spectral_fit"]


def _figure():  # type: ignore[no-untyped-def]
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    return plt


def plot_deflection_map(
    result: xr.Dataset,
    path: str | Path,
    overwrite: bool = False,
    inputs: Iterable[str | Path] = (),
    title: str = "Plate deflection",
) -> Path:
    """Map of the deflection with contours and the load's outline.

    Downward deflection (moat) is red, uplift (forebulge) blue, on a diverging
    colour map centred on zero; the zero line is dashed; the load footprint is
    outlined in black. Axes in km.

    Parameters
    ----------
    result : xarray.Dataset
        ``deflection`` (m) and, optionally, ``load`` (Pa).
    path : str or pathlib.Path
        PNG file.
    overwrite : bool, default False
        Replace an existing file.
    inputs : iterable of path
        Files never to be overwritten.
    title : str
        Figure title.

    Returns
    -------
    pathlib.Path
    """
    from matplotlib.colors import TwoSlopeNorm

    plt = _figure()
    w = result["deflection"].values
    x = result["x"].values / 1e3
    y = result["y"].values / 1e3
    down, up = max(float(w.max()), 1e-12), max(-float(w.min()), 1e-12)
    fig, ax = plt.subplots(figsize=(7.5, 6.0), constrained_layout=True)
    mesh = ax.pcolormesh(x, y, w, shading="nearest", cmap="RdBu_r",
                         norm=TwoSlopeNorm(vmin=-up, vcenter=0.0, vmax=down))
    levels = np.linspace(0.0, down, 7)[1:-1]
    if levels.size:
        ax.contour(x, y, w, levels=levels, colors="0.25", linewidths=0.6)
    if w.min() < 0 < w.max():
        ax.contour(x, y, w, levels=[0.0], colors="0.1", linewidths=0.9, linestyles="--")
    if "load" in result and float(result["load"].max()) > 0:
        q = result["load"].values
        ax.contour(x, y, q, levels=[0.01 * float(q.max())], colors="k", linewidths=1.4)
    ticks = np.unique(np.concatenate([[-up, 0.0], np.linspace(0.0, down, 6)]))
    cbar = fig.colorbar(mesh, ax=ax, shrink=0.85, ticks=ticks, format="%.3g")
    cbar.set_label("deflection (m, positive down)")
    ax.set_xlabel("x (km)")
    ax.set_ylabel("y (km)")
    ax.set_aspect("equal")
    ax.set_title(f"{title}\nred: depressed (moat), blue: uplifted (forebulge); "
                 "dashed: zero; black: load outline", fontsize=9)
    with atomic_path(path, overwrite, inputs) as tmp:
        fig.savefig(tmp, format="png", dpi=120)
    plt.close(fig)
    return Path(path)


def plot_misfit(
    fit: TeFit,
    path: str | Path,
    overwrite: bool = False,
    inputs: Iterable[str | Path] = (),
    title: str = "Elastic thickness misfit",
) -> Path:
    """RMS misfit against Te (km, log axis) with the best Te and its interval.

    Parameters
    ----------
    fit : gridflex.TeFit
        Result of :func:`gridflex.fit_te`.
    path : str or pathlib.Path
        PNG file.
    overwrite : bool, default False
        Replace an existing file.
    inputs : iterable of path
        Files never to be overwritten.
    title : str
        Figure title.

    Returns
    -------
    pathlib.Path
    """
    plt = _figure()
    fig, ax = plt.subplots(figsize=(6.4, 4.2), constrained_layout=True)
    te_km = fit.misfit["te"].values / 1e3
    ax.plot(te_km, fit.misfit.values, "o-", ms=3, color="0.2", label="RMS misfit")
    ax.axvspan(fit.te_low / 1e3, fit.te_high / 1e3, color="tab:blue", alpha=0.2,
               label=f"{fit.confidence:.0%} interval")
    ax.axvline(fit.te / 1e3, color="tab:blue",
               label=f"Te = {fit.te / 1e3:.2f} km "
                     f"[{fit.te_low / 1e3:.2f}, {fit.te_high / 1e3:.2f}]")
    ax.set_xscale("log")
    ax.set_xlabel("elastic thickness Te (km)")
    unit = fit.misfit.attrs.get("units", "")
    ax.set_ylabel(f"RMS misfit of {fit.quantity} ({unit})")
    ax.set_title(title, fontsize=10)
    ax.legend(loc="best", fontsize="small")
    with atomic_path(path, overwrite, inputs) as tmp:
        fig.savefig(tmp, format="png", dpi=120)
    plt.close(fig)
    return Path(path)


def plot_spectral_fit(
    fit: SpectralFit,
    path: str | Path,
    overwrite: bool = False,
    inputs: Iterable[str | Path] = (),
    title: str = "Observed and predicted spectra",
) -> Path:
    """Observed and best-fitting theoretical admittance or coherence against wavelength.

    Parameters
    ----------
    fit : gridflex.spectra.SpectralFit
        Result of :func:`gridflex.spectra.fit_te_spectral`.
    path : str or pathlib.Path
        PNG file.
    overwrite : bool, default False
        Replace an existing file.
    inputs : iterable of path
        Files never to be overwritten.
    title : str
        Figure title.

    Returns
    -------
    pathlib.Path
    """
    plt = _figure()
    fig, ax = plt.subplots(figsize=(6.4, 4.2), constrained_layout=True)
    curves = fit.curves
    wavelength_km = 2.0 * np.pi / curves["wavenumber"].values / 1e3
    ax.plot(wavelength_km, curves["observed"].values, "o", ms=4, color="0.2", label="observed")
    label = f"predicted, Te = {fit.te / 1e3:.1f} km"
    if fit.load_ratio is not None:
        label += f", f = {fit.load_ratio:.2f}"
    ax.plot(wavelength_km, curves["predicted"].values, "-", color="tab:red", label=label)
    ax.set_xscale("log")
    ax.invert_xaxis()
    ax.set_xlabel("wavelength (km)")
    unit = curves["observed"].attrs.get("units", "")
    ax.set_ylabel(f"{curves.attrs.get('quantity', '')} ({unit})")
    ax.set_title(title, fontsize=10)
    ax.legend(loc="best", fontsize="small")
    with atomic_path(path, overwrite, inputs) as tmp:
        fig.savefig(tmp, format="png", dpi=120)
    plt.close(fig)
    return Path(path)
