"""Pictures of results (matplotlib, PNG, written atomically).

matplotlib is imported with the non-interactive Agg backend inside each function
so that importing gridflex never opens a window.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

import numpy as np
import xarray as xr

from .io.atomic import atomic_path

__all__ = ["plot_deflection_map", "plot_point_series", "plot_uplift_rate_map"]


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


def plot_uplift_rate_map(
    rate: xr.DataArray,
    path: str | Path,
    overwrite: bool = False,
    inputs: Iterable[str | Path] = (),
    title: str = "Uplift rate",
    points: Iterable[tuple[str, float, float]] = (),
) -> Path:
    """Map of an uplift rate (m/yr, positive up) at one time, shown in mm/yr.

    Uplift (rebound) is red, subsidence blue, on a diverging colour map centred on
    zero; the zero line is dashed; named points are marked. Axes in km.

    Parameters
    ----------
    rate : xarray.DataArray
        ``uplift_rate`` on dims ``("y", "x")`` (m/yr).
    path : str or pathlib.Path
        PNG file.
    overwrite, inputs
        As :func:`plot_deflection_map`.
    title : str
        Figure title (say which time).
    points : iterable of (name, x, y)
        Points to mark (m).
    """
    from matplotlib.colors import TwoSlopeNorm

    plt = _figure()
    v = rate.values * 1e3
    x = rate["x"].values / 1e3
    y = rate["y"].values / 1e3
    up, down = max(float(v.max()), 1e-12), max(-float(v.min()), 1e-12)
    fig, ax = plt.subplots(figsize=(7.5, 6.0), constrained_layout=True)
    mesh = ax.pcolormesh(x, y, v, shading="nearest", cmap="RdBu_r",
                         norm=TwoSlopeNorm(vmin=-down, vcenter=0.0, vmax=up))
    if v.min() < 0 < v.max():
        ax.contour(x, y, v, levels=[0.0], colors="0.1", linewidths=0.9, linestyles="--")
    for name, px, py in points:
        ax.plot(px / 1e3, py / 1e3, "k^", markersize=6)
        ax.annotate(name, (px / 1e3, py / 1e3), xytext=(4, 4), textcoords="offset points")
    ticks = np.unique(np.concatenate([[-down, 0.0], np.linspace(0.0, up, 6)]))
    cbar = fig.colorbar(mesh, ax=ax, shrink=0.85, ticks=ticks, format="%.3g")
    cbar.set_label("uplift rate (mm/yr, positive up)")
    ax.set_xlabel("x (km)")
    ax.set_ylabel("y (km)")
    ax.set_aspect("equal")
    ax.set_title(f"{title}\nred: rising (rebound), blue: sinking; dashed: zero", fontsize=9)
    with atomic_path(path, overwrite, inputs) as tmp:
        fig.savefig(tmp, format="png", dpi=120)
    plt.close(fig)
    return Path(path)


def plot_point_series(
    times: np.ndarray,
    series: dict[str, tuple[np.ndarray, np.ndarray]],
    path: str | Path,
    overwrite: bool = False,
    inputs: Iterable[str | Path] = (),
    title: str = "Deflection and uplift rate at named points",
    time_label: str = "time (years)",
) -> Path:
    """Deflection and uplift rate through time at named points, one line per point.

    Parameters
    ----------
    times : numpy.ndarray
        Times (years).
    series : dict
        ``{name: (deflection m, uplift rate m/yr)}`` along *times*.
    path : str or pathlib.Path
        PNG file.
    overwrite, inputs
        As :func:`plot_deflection_map`.
    """
    plt = _figure()
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(8.0, 6.5), sharex=True,
                                      constrained_layout=True)
    for name, (deflection, rate) in series.items():
        top.plot(times, -np.asarray(deflection), label=name)
        bottom.plot(times, np.asarray(rate) * 1e3, label=name)
    top.axhline(0.0, color="0.5", linewidth=0.6)
    bottom.axhline(0.0, color="0.5", linewidth=0.6)
    top.set_ylabel("vertical displacement (m, up)")
    bottom.set_ylabel("uplift rate (mm/yr)")
    bottom.set_xlabel(time_label)
    top.legend(fontsize=8)
    top.set_title(title, fontsize=10)
    with atomic_path(path, overwrite, inputs) as tmp:
        fig.savefig(tmp, format="png", dpi=120)
    plt.close(fig)
    return Path(path)
