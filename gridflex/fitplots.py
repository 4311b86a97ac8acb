"""Figures for Te estimation: the misfit curve and observed against predicted spectra.

Figures are built with :class:`matplotlib.figure.Figure` directly (no pyplot
state), so they are safe in scripts, tests and worker processes.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from .fitting import TeFit
from .spectra import SpectralFit

__all__ = ["plot_misfit", "plot_spectral_fit"]


def _figure(ax: Any) -> tuple[Any, Any]:
    if ax is not None:
        return ax.figure, ax
    from matplotlib.figure import Figure

    fig = Figure(figsize=(6.4, 4.2), layout="constrained")
    return fig, fig.add_subplot()


def _save(fig: Any, path: str | Path | None) -> None:
    if path is not None:
        fig.savefig(path, dpi=150)


def plot_misfit(fit: TeFit, ax: Any = None, path: str | Path | None = None) -> Any:
    """RMS misfit against Te (km, log axis) with the best Te and its interval.

    Parameters
    ----------
    fit : TeFit
        Result of :func:`gridflex.fit_te`.
    ax : matplotlib.axes.Axes, optional
        Axes to draw on; a new figure is made otherwise.
    path : str or Path, optional
        Write the figure there (PNG by suffix).

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = _figure(ax)
    te_km = fit.misfit["te"].values / 1e3
    ax.plot(te_km, fit.misfit.values, "o-", ms=3, color="0.2", label="RMS misfit")
    ax.axvspan(
        fit.te_low / 1e3,
        fit.te_high / 1e3,
        color="tab:blue",
        alpha=0.2,
        label=f"{fit.confidence:.0%} interval",
    )
    ax.axvline(
        fit.te / 1e3,
        color="tab:blue",
        label=f"Te = {fit.te / 1e3:.2f} km [{fit.te_low / 1e3:.2f}, {fit.te_high / 1e3:.2f}]",
    )
    ax.set_xscale("log")
    ax.set_xlabel("elastic thickness Te (km)")
    unit = fit.misfit.attrs.get("units", "")
    ax.set_ylabel(f"RMS misfit of {fit.quantity} ({unit})")
    ax.legend(loc="best", fontsize="small")
    _save(fig, path)
    return fig


def plot_spectral_fit(fit: SpectralFit, ax: Any = None, path: str | Path | None = None) -> Any:
    """Observed and best-fitting theoretical admittance or coherence against wavelength.

    Parameters
    ----------
    fit : SpectralFit
        Result of :func:`gridflex.spectra.fit_te_spectral`.
    ax : matplotlib.axes.Axes, optional
        Axes to draw on; a new figure is made otherwise.
    path : str or Path, optional
        Write the figure there.

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = _figure(ax)
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
    ax.legend(loc="best", fontsize="small")
    _save(fig, path)
    return fig
