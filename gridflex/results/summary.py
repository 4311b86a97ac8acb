"""Numbers that describe a deflection at a glance: depth, moat, forebulge."""

from __future__ import annotations

from typing import Any

import numpy as np
import xarray as xr
from scipy import ndimage

__all__ = ["deflection_summary", "format_summary"]


def deflection_summary(result: xr.Dataset, footprint_fraction: float = 0.01) -> dict[str, Any]:
    """Maximum deflection, moat depth and forebulge of a solve result.

    Parameters
    ----------
    result : xarray.Dataset
        Output of :func:`gridflex.solve` (``deflection`` and ``load``).
    footprint_fraction : float, default 0.01
        Cells whose load exceeds this fraction of the peak load form the load's
        footprint.

    Returns
    -------
    dict
        ``max_deflection`` (m, down), ``moat_depth`` (largest deflection outside the
        footprint, m), ``bulge_height`` (largest uplift, m, positive up),
        ``bulge_distance`` (from the bulge crest to the nearest footprint cell, m),
        and the crest position ``bulge_x``, ``bulge_y`` (m).
    """
    w = result["deflection"].values
    q = result["load"].values
    dy = float(abs(result["y"][1] - result["y"][0]))
    dx = float(abs(result["x"][1] - result["x"][0]))
    peak_load = float(q.max())
    footprint = q > footprint_fraction * peak_load if peak_load > 0 else np.zeros_like(w, bool)
    outside = ~footprint
    imax = np.unravel_index(np.argmax(w), w.shape)
    out: dict[str, Any] = {
        "max_deflection": float(w[imax]),
        "max_deflection_x": float(result["x"][imax[1]]),
        "max_deflection_y": float(result["y"][imax[0]]),
        "moat_depth": float(w[outside].max()) if outside.any() else float("nan"),
    }
    ibulge = np.unravel_index(np.argmin(w), w.shape)
    out["bulge_height"] = max(-float(w[ibulge]), 0.0)
    out["bulge_x"] = float(result["x"][ibulge[1]])
    out["bulge_y"] = float(result["y"][ibulge[0]])
    if footprint.any():
        distance = ndimage.distance_transform_edt(outside, sampling=(dy, dx))
        out["bulge_distance"] = float(distance[ibulge])
    else:
        out["bulge_distance"] = float("nan")
    return out


def format_summary(summary: dict[str, Any]) -> str:
    """The summary as a few aligned lines of text (km and m)."""
    lines = [
        f"maximum deflection  {summary['max_deflection']:10.1f} m (downward)",
        f"moat depth          {summary['moat_depth']:10.1f} m (deepest point beyond the load)",
        f"forebulge height    {summary['bulge_height']:10.1f} m (uplift)",
        f"forebulge distance  {summary['bulge_distance'] / 1e3:10.1f} km from the load's edge",
    ]
    if "compensation_outside" in summary:
        share = 100.0 * summary["compensation_outside"]
        lines.append(f"beyond the grid     {share:10.1f} % of the compensation (not written)")
    return "\n".join(lines)
