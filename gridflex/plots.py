"""Pictures of results (matplotlib, PNG, written atomically).

matplotlib is imported with the non-interactive Agg backend inside each function,
so importing gridflex never opens a window. Signed fields (deflection, anomalies)
use a diverging colour map centred on zero; one-signed fields (fill thickness) a
perceptually uniform sequential one.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from .io.atomic import atomic_path

__all__ = ["plot_deflection_map", "plot_field_map", "plot_profile"]

Paths = Iterable[str | Path]


def _pyplot() -> Any:
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    return plt


def _axes_coordinates(
    da: xr.DataArray | xr.Dataset,
) -> tuple[np.ndarray, np.ndarray, str, str, float]:
    """x, y for plotting, their labels and the aspect ratio (km, or degrees)."""
    if str(da["x"].attrs.get("units", "")).lower().startswith("degree"):
        y = da["y"].values
        aspect = 1.0 / max(np.cos(np.radians(float(np.mean(y)))), 1e-3)
        return da["x"].values, y, "longitude (°E)", "latitude (°N)", aspect
    return da["x"].values / 1e3, da["y"].values / 1e3, "x (km)", "y (km)", 1.0


def _save(fig: Any, path: str | Path, overwrite: bool, inputs: Paths) -> Path:
    plt = _pyplot()
    with atomic_path(path, overwrite, inputs) as tmp:
        fig.savefig(tmp, format="png", dpi=120)
    plt.close(fig)
    return Path(path)


def plot_field_map(
    field: xr.DataArray,
    path: str | Path,
    title: str,
    label: str,
    overwrite: bool = False,
    inputs: Paths = (),
    outline: xr.DataArray | None = None,
    signed: bool = True,
    contours: int = 5,
) -> Path:
    """Map of one grid with contours and, optionally, a load outline.

    Parameters
    ----------
    field : xarray.DataArray
        Values on ``("y", "x")`` (coordinates in m or degrees).
    path : str or pathlib.Path
        PNG file.
    title, label : str
        Figure title and colour-bar label (with units).
    overwrite : bool, default False
        Replace an existing file.
    inputs : iterable of path
        Files never to be overwritten.
    outline : xarray.DataArray, optional
        A load on the same grid; its 1 % contour is drawn in black.
    signed : bool, default True
        Diverging map centred on zero (red positive, blue negative), with the zero
        line dashed; otherwise the sequential ``cividis`` map.
    contours : int, default 5
        Number of contour lines over the positive range.

    Returns
    -------
    pathlib.Path
    """
    from matplotlib.colors import TwoSlopeNorm

    plt = _pyplot()
    values = np.asarray(field.values, dtype=np.float64)
    x, y, xlabel, ylabel, aspect = _axes_coordinates(field)
    fig, ax = plt.subplots(figsize=(7.5, 6.0), constrained_layout=True)
    finite = values[np.isfinite(values)]
    top = float(finite.max()) if finite.size else 1.0
    bottom = float(finite.min()) if finite.size else 0.0
    if signed:
        high, low = max(top, 1e-12), max(-bottom, 1e-12)
        mesh = ax.pcolormesh(x, y, values, shading="nearest", cmap="RdBu_r",
                             norm=TwoSlopeNorm(vmin=-low, vcenter=0.0, vmax=high))
        ticks = np.unique(np.concatenate([[-low, 0.0], np.linspace(0.0, high, 6)]))
        levels = np.linspace(0.0, high, contours + 2)[1:-1]
        if bottom < 0 < top:
            ax.contour(x, y, values, levels=[0.0], colors="0.1", linewidths=0.9,
                       linestyles="--")
    else:
        mesh = ax.pcolormesh(x, y, values, shading="nearest", cmap="cividis")
        ticks = None
        levels = np.linspace(bottom, top, contours + 2)[1:-1]
    if levels.size and top > bottom:
        ax.contour(x, y, values, levels=levels, colors="0.25", linewidths=0.6)
    if outline is not None and float(outline.max()) > 0:
        q = np.asarray(outline.values)
        ax.contour(x, y, q, levels=[0.01 * float(q.max())], colors="k", linewidths=1.4)
    cbar = fig.colorbar(mesh, ax=ax, shrink=0.85, ticks=ticks, format="%.3g")
    cbar.set_label(label)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.set_aspect(aspect)
    ax.set_title(title, fontsize=10)
    return _save(fig, path, overwrite, inputs)


def plot_deflection_map(
    result: xr.Dataset,
    path: str | Path,
    overwrite: bool = False,
    inputs: Paths = (),
    title: str = "Plate deflection",
) -> Path:
    """Map of the deflection: red depressed (moat), blue uplifted (forebulge), dashed
    zero line, black load outline (see :func:`plot_field_map`)."""
    return plot_field_map(
        result["deflection"], path,
        f"{title}\nred: depressed (moat), blue: uplifted (forebulge); dashed: zero; "
        "black: load outline",
        "deflection (m, positive down)", overwrite, inputs,
        outline=result["load"] if "load" in result else None,
    )


def plot_profile(
    profile: xr.Dataset,
    path: str | Path,
    overwrite: bool = False,
    inputs: Paths = (),
    title: str = "Profile",
) -> Path:
    """Load (top panel) and deflected plate or final surface (bottom) along a profile.

    Parameters
    ----------
    profile : xarray.Dataset
        Output of :func:`gridflex.profile.sample_profile` with ``deflection`` and,
        when present, ``load`` (Pa) and ``surface`` (m).
    path : str or pathlib.Path
        PNG file.
    """
    plt = _pyplot()
    km = profile["distance"].values / 1e3
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(8.0, 6.0), sharex=True,
                                      constrained_layout=True, height_ratios=(1, 2))
    if "load" in profile:
        top.fill_between(km, profile["load"].values / 1e6, color="0.55", linewidth=0)
        top.set_ylabel("load (MPa)")
    top.set_title(title, fontsize=10)
    bottom.plot(km, -profile["deflection"].values, color="tab:red",
                label="plate top displacement (−deflection)")
    if "surface" in profile:
        bottom.plot(km, profile["surface"].values, color="tab:blue", label="final surface")
    bottom.axhline(0.0, color="0.3", linewidth=0.7, linestyle="--")
    bottom.set_ylabel("height (m, positive up)")
    bottom.set_xlabel("distance along the profile (km)")
    bottom.legend(loc="best", fontsize=8)
    return _save(fig, path, overwrite, inputs)
