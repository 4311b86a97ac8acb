"""Pieces the benchmark scripts share: best-of timing and an invented seamount load.

The scripts are run as ``python tests/benchmarks/<name>.py``, so this folder is on
``sys.path`` and they import this module as ``timing``.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

import numpy as np
import xarray as xr


def best(func: Callable[[], Any], repeat: int) -> tuple[float, Any]:
    """The shortest wall time (s) of *repeat* calls of *func*, and its last result."""
    times, out = [], None
    for _ in range(repeat):
        start = time.perf_counter()
        out = func()
        times.append(time.perf_counter() - start)
    return min(times), out


def gaussian_seamount_load(n: int, dx: float) -> xr.DataArray:
    """Invented load (Pa): a Gaussian seamount 3 km high, 20 km wide, of density
    contrast 1770 kg m⁻³, on an n × n grid of spacing *dx* (m) centred on the origin."""
    x = (np.arange(n) - n / 2) * dx
    xx, yy = np.meshgrid(x, x)
    return xr.DataArray(
        1770 * 9.81 * 3000 * np.exp(-(xx**2 + yy**2) / (2 * 20e3**2)),
        dims=("y", "x"),
        coords={"y": x, "x": x},
    )


def margin_seamounts_load(n: int, dx: float) -> xr.DataArray:
    """Invented load (Pa) of the te-map fits: two Gaussian seamounts 2.5 km high, 15 km wide,
    of density contrast 1770 kg m⁻³, at (-60, 20) km and (60, -20) km, one on each side of
    the line x = 0, on an n × n grid of spacing *dx* (m) centred on the origin."""
    x = (np.arange(n) - n / 2) * dx
    xx, yy = np.meshgrid(x, x)
    height = sum(
        2500.0 * np.exp(-((xx - cx) ** 2 + (yy - cy) ** 2) / (2 * 15e3**2))
        for cx, cy in ((-60e3, 20e3), (60e3, -20e3))
    )
    return xr.DataArray(height * 1770.0 * 9.81, dims=("y", "x"), coords={"y": x, "x": x})
