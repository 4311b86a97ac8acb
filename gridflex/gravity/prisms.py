"""Closed-form gravity of right rectangular prisms (independent reference).

The vertical attraction of a homogeneous right rectangular prism has a closed
form (Nagy 1966, *Geophysics* 31, 362-371; Nagy, Papp & Benedek 2000, *J. Geodesy*
74, 552-560; Plouff 1976, *Geophysics* 41, 727-741). It is exact for any
observation point outside the prism and is used to check the Fourier series of
:mod:`gridflex.gravity.interfaces`, and as a direct sum near stations.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from gridflex.constants import GRAVITATIONAL_CONSTANT, MGAL
from gridflex.errors import InputError

__all__ = ["prism_gravity"]


def _log_term(a: np.ndarray, r: np.ndarray) -> np.ndarray:
    """ln(a + r), with the limit 0 * ln(0) handled by the caller's factor.

    a + r vanishes only when the observation lies on a prism edge line with
    a < 0; the factor multiplying the log is then zero, so any finite value
    gives the right product. 1 is used (log 1 = 0).
    """
    s = a + r
    return np.log(np.where(s > 0.0, s, 1.0))


def prism_gravity(
    x: np.ndarray | float,
    y: np.ndarray | float,
    z: np.ndarray | float,
    bounds: Sequence[float],
    density: float,
) -> np.ndarray:
    """Vertical attraction (mGal, positive down) of a homogeneous rectangular prism.

    .. math:: g_z = G\\rho \\sum_{i,j,k=1}^{2} (-1)^{i+j+k}
              \\left[ z_k \\arctan\\frac{x_i y_j}{z_k r_{ijk}}
              - x_i \\ln(y_j + r_{ijk}) - y_j \\ln(x_i + r_{ijk}) \\right]

    with x_i = xi_i - x0, y_j = eta_j - y0, z_k = zeta_k - z0 and
    r_ijk = sqrt(x_i^2 + y_j^2 + z_k^2) (Nagy 1966; Nagy, Papp & Benedek 2000).

    Parameters
    ----------
    x, y : float or numpy.ndarray
        Horizontal coordinates of the observation points (m).
    z : float or numpy.ndarray
        Depth of the observation points (m, **positive down**), broadcast with x, y.
    bounds : sequence of 6 floats
        ``(x1, x2, y1, y2, z1, z2)``: the prism's extent (m), depths positive down,
        each pair increasing.
    density : float
        Density or density contrast of the prism (kg m^-3).

    Returns
    -------
    numpy.ndarray
        Downward attraction (mGal); positive for a positive density below the
        observation point.

    Raises
    ------
    InputError
        If *bounds* is not six increasing pairs.

    Examples
    --------
    >>> round(float(prism_gravity(300.0, -200.0, 0.0,
    ...       (-1e3, 2e3, -500.0, 1.5e3, 500.0, 3e3), 1000.0)), 5)
    23.08495
    """
    try:
        x1, x2, y1, y2, z1, z2 = (float(b) for b in bounds)
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"bounds must be six numbers (x1, x2, y1, y2, z1, z2), got {bounds!r}"
        ) from exc
    if not (x1 < x2 and y1 < y2 and z1 < z2):
        raise InputError(f"bounds must satisfy x1 < x2, y1 < y2, z1 < z2 (m), got {bounds!r}")
    x0, y0, z0 = np.broadcast_arrays(
        np.asarray(x, dtype=np.float64),
        np.asarray(y, dtype=np.float64),
        np.asarray(z, dtype=np.float64),
    )
    total = np.zeros(x0.shape, dtype=np.float64)
    for i, xi in enumerate((x1, x2)):
        dx = xi - x0
        for j, eta in enumerate((y1, y2)):
            dy = eta - y0
            for k, zeta in enumerate((z1, z2)):
                dz = zeta - z0
                r = np.sqrt(dx * dx + dy * dy + dz * dz)
                # mu_ijk = (-1)^(i+j+k) with i, j, k counted from 1; here they count
                # from 0, so mu = -(-1)^(i+j+k).
                mu = 1.0 if (i + j + k) % 2 else -1.0
                term = (
                    dz * np.arctan2(dx * dy, dz * r) - dx * _log_term(dy, r) - dy * _log_term(dx, r)
                )
                total += mu * term
    return GRAVITATIONAL_CONSTANT * density * total / MGAL
