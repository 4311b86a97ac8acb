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

__all__ = ["plot_deflection_map"]


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
