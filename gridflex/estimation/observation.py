"""The observed side of every forward-model fit of te: what is compared, and how a
plate's deflection becomes the observed quantity.

One rule turns a deflection w (m, positive down) into the quantity observed, whichever
solver made it (:class:`QuantityRule`): ``deflection`` is w, ``surface`` (the elevation
of a flexed surface, positive up) is -w, and ``free_air_anomaly`` (mGal) is either the
first-order anomaly of the load and the flexed crust and Moho
(:mod:`gridflex.gravity.first_order`; :class:`FirstOrderGravity`) or the full Parker
series of :func:`gridflex.model_free_air_anomaly`. A fitted constant (and optionally a
factor on the load) is added by :func:`gridflex.estimation.likelihood.nuisance_fit`.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from gridflex.constants import GRAVITATIONAL_CONSTANT, MGAL
from gridflex.engine import EDGES, deflection_attrs, result_dataset
from gridflex.errors import InputError
from gridflex.gravity.anomalies import model_free_air_anomaly
from gridflex.gravity.first_order import CrustLayers, gravity_terms
from gridflex.grid import check_same_grid
from gridflex.plate import Plate
from gridflex.solvers.spectral import SpectralProblem, scale_spectrum
from gridflex.validation import check_choice, check_integer, check_number

__all__ = [
    "QUANTITIES",
    "UNITS",
    "FirstOrderGravity",
    "QuantityRule",
    "best_model_dataset",
    "check_fit_options",
    "check_plate",
    "compared_cells",
    "gravity_attrs",
    "gravity_model",
]

QUANTITIES = ("deflection", "surface", "free_air_anomaly")
"""Accepted values of ``quantity`` in every forward-model fit of te."""

UNITS = {"deflection": "m", "surface": "m", "free_air_anomaly": "mGal"}
"""Unit of each quantity (and of its offset and RMS misfit)."""

_LONG_NAMES = {
    "deflection": "plate deflection (positive downward)",
    "surface": "elevation of the flexed surface (positive upward)",
    "free_air_anomaly": "free-air gravity anomaly",
}


def check_plate(plate: Any, function: str, te_grid: bool) -> Plate:
    """*plate* if it is a :class:`Plate` whose te is a grid exactly when *te_grid*.

    Raises
    ------
    InputError
        Naming *function* and what its plate must be.
    """
    if not isinstance(plate, Plate):
        raise InputError(f"plate must be a gridflex.Plate, got {type(plate).__name__}")
    if plate.is_variable and not te_grid:
        raise InputError(
            f"{function} needs a plate of constant te; got a te grid (fit a factor on it "
            "with gridflex.fit_te_scale)"
        )
    if te_grid and not plate.is_variable:
        raise InputError(
            f"{function} needs a plate whose te is a grid (xarray.DataArray on the load "
            f"grid); got te = {plate.te!r} m (fit a constant te with gridflex.fit_te)"
        )
    return plate


def check_fit_options(
    quantity: Any, edges: Any, confidence: Any, samples: Any, edge_choices: tuple[str, ...]
) -> tuple[str, str, float, int]:
    """The scalar arguments shared by the fits, checked: (quantity, edges, confidence, samples).

    *edge_choices* are the edges the fit's solver can represent (a subset of
    :data:`gridflex.engine.EDGES`).
    """
    quantity = check_choice("quantity", quantity, QUANTITIES)
    edges = check_choice("edges", edges, EDGES)
    if edges not in edge_choices:
        raise InputError(
            f"edges must be one of {', '.join(map(repr, edge_choices))} for this fit, got "
            f"{edges!r} (the constant-te fit uses the spectral solver; fit a te grid with "
            "gridflex.fit_te_scale for clamped or free edges)"
        )
    level = check_confidence(confidence)
    return quantity, edges, level, check_integer("samples", samples, minimum=5)


def check_confidence(confidence: Any) -> float:
    """The confidence level of an interval: a number in (0, 1)."""
    level = check_number("confidence", confidence)
    if not 0.0 < level < 1.0:
        raise InputError(f"confidence must lie in (0, 1), got {confidence!r}")
    return level


def _check_mask(mask: Any, observed: xr.DataArray, load: xr.DataArray) -> np.ndarray:
    values = np.asarray(observed.values, dtype=np.float64)
    if np.isinf(values).any():
        raise InputError(
            f"observed has {int(np.isinf(values).sum())} infinite value(s); "
            "use NaN for cells without data"
        )
    valid = ~np.isnan(values)
    if mask is None:
        return valid
    check_same_grid(mask, load, "mask")
    values = np.asarray(mask.values)
    if values.dtype != bool:
        if not np.all(np.isin(values, (0, 1))):
            raise InputError("mask must be boolean (True where the data are compared)")
        values = values.astype(bool)
    return values & valid


def compared_cells(observed: Any, load: xr.DataArray, mask: Any, parameters: int) -> np.ndarray:
    """Where the data are compared: inside *mask* and finite in *observed*.

    Raises
    ------
    InputError
        *observed* or *mask* not on the load grid, or fewer than *parameters* + 2 cells.
    """
    if not isinstance(observed, xr.DataArray):
        raise InputError(f"observed must be an xarray.DataArray, got {type(observed).__name__}")
    check_same_grid(observed, load, "observed")
    inside = _check_mask(mask, observed, load)
    n = int(inside.sum())
    if n < parameters + 2:
        raise InputError(
            f"only {n} cells are compared (mask and finite observed); need >= {parameters + 2}"
        )
    return inside


def gravity_model(
    quantity: str,
    gravity: Any,
    plate: Plate,
    load: xr.DataArray,
    edges: str,
    fit_load_scale: bool,
) -> tuple[CrustLayers | None, tuple[xr.DataArray, dict[str, Any]] | None]:
    """The gravity model of a free-air fit: (first-order layers, None) or (None, series)."""
    if quantity != "free_air_anomaly":
        return None, None
    if isinstance(gravity, CrustLayers):
        gravity.check_plate(plate)
        return gravity, None
    if isinstance(gravity, Mapping):
        if fit_load_scale:
            raise InputError(
                "fit_load_scale needs a model linear in the load: use "
                "gravity=CrustLayers(...) (first order), not the full series"
            )
        return None, (load, {"edges": edges, **dict(gravity)})
    raise InputError(
        "quantity 'free_air_anomaly' needs gravity=CrustLayers(seafloor_depth=...) "
        "(first-order model) or a mapping of gridflex.model_free_air_anomaly keywords "
        f"(full Parker series); got {gravity!r}"
    )


class FirstOrderGravity:
    """First-order free-air anomaly (mGal) of the load and a deflection on one FFT grid.

    The anomaly spectrum is ``top Q - K interfaces W`` with Q the load, W the
    deflection, K the restoring stiffness and ``top``, ``interfaces`` the terms of
    :func:`gridflex.gravity.first_order.gravity_terms` times 2 pi G / (g mGal)
    (PHYSICS.md 6.3; the n = 1 term of Parker's 1973 series).

    Parameters
    ----------
    problem : SpectralProblem
        Gives the FFT grid (its rigidity is not used).
    load_spectrum : numpy.ndarray
        ``problem.load_spectrum(load)``.
    layers : CrustLayers
        Depths and crustal density.
    plate : Plate
        Densities and gravity.
    """

    def __init__(
        self,
        problem: SpectralProblem,
        load_spectrum: np.ndarray,
        layers: CrustLayers,
        plate: Plate,
    ) -> None:
        self.problem = problem
        self.load_spectrum = load_spectrum
        self.stiffness = plate.restoring_stiffness
        top, interfaces = gravity_terms(problem.wavenumber(), layers, plate)
        scale = 2.0 * math.pi * GRAVITATIONAL_CONSTANT / (plate.gravity * MGAL)
        self.top = top * scale
        self.interfaces = interfaces * (scale * self.stiffness)

    def anomaly(self, deflection_spectrum: np.ndarray) -> np.ndarray:
        """The anomaly (mGal) on the grid, from the deflection's spectrum on the FFT grid
        (*deflection_spectrum* is overwritten)."""
        flexed = scale_spectrum(deflection_spectrum, self.interfaces, out=deflection_spectrum)
        spectrum = scale_spectrum(self.load_spectrum, self.top)
        spectrum -= flexed
        return self.problem.crop(self.problem.inverse(spectrum))


@dataclass(frozen=True)
class QuantityRule:
    """How a plate's deflection becomes the observed quantity: one rule for every fit.

    Attributes
    ----------
    quantity : str
        One of :data:`QUANTITIES`.
    series : tuple or None
        ``(load grid, gridflex.model_free_air_anomaly keywords)`` for the full series.
    """

    quantity: str
    series: tuple[xr.DataArray, dict[str, Any]] | None = None

    def predict(
        self,
        deflection: Callable[[], np.ndarray],
        plate: Plate,
        first_order: Callable[[], np.ndarray] | None = None,
    ) -> np.ndarray:
        """The quantity predicted for a plate, without offset.

        Parameters
        ----------
        deflection : callable
            Returns w (m, positive down) on the grid (called only when needed).
        plate : Plate
            The trial plate (for the series' densities).
        first_order : callable, optional
            Returns the first-order anomaly (mGal); needed for ``free_air_anomaly``
            without the series.
        """
        if self.quantity == "deflection":
            return deflection()
        if self.quantity == "surface":
            return -deflection()
        if self.series is not None:
            load_grid, options = self.series
            result = result_dataset(load_grid, deflection(), plate, {})
            return np.asarray(model_free_air_anomaly(result, **options).values, dtype=np.float64)
        assert first_order is not None
        return first_order()


def gravity_attrs(
    layers: CrustLayers | None, series: object | None, plate: Plate
) -> dict[str, Any]:
    """Attributes that record the gravity model of a free-air fit (empty otherwise)."""
    attrs: dict[str, Any] = {}
    if layers is not None:
        attrs.update({f"gravity_{k}": v for k, v in layers.describe(plate).items()})
        attrs["gravity_model"] = "first order (linear term of the Parker series)"
    if series is not None:
        attrs["gravity_model"] = "Parker series (gridflex.model_free_air_anomaly)"
    return attrs


def best_model_dataset(
    result: xr.Dataset,
    quantity: str,
    observed: np.ndarray,
    inside: np.ndarray,
    model: np.ndarray,
    offset: float,
) -> xr.Dataset:
    """*result* (the best plate's solve) with the comparison added.

    Adds ``observed``, ``predicted`` (*model* plus *offset*), ``residual`` (NaN outside
    the mask) and ``mask``, and for a gravity fit the ``free_air_anomaly`` of the model
    (*model* is the fitted model without the offset, load scale applied).
    """
    ds = result.copy()
    unit_attrs = {"units": UNITS[quantity]}
    long_name = _LONG_NAMES[quantity]
    predicted = model + offset
    ds["observed"] = (("y", "x"), observed, {**unit_attrs, "long_name": f"observed {long_name}"})
    ds["predicted"] = (
        ("y", "x"),
        predicted,
        {**unit_attrs, "long_name": f"best model {long_name}"},
    )
    ds["residual"] = (
        ("y", "x"),
        np.where(inside, observed - predicted, np.nan),
        {**unit_attrs, "long_name": "observed minus predicted"},
    )
    ds["mask"] = (("y", "x"), inside, {"long_name": "cells compared in the fit"})
    if quantity == "free_air_anomaly":
        ds["free_air_anomaly"] = (
            ("y", "x"),
            model,
            {"units": "mGal", "long_name": "free-air anomaly of the best model (no offset)"},
        )
    ds["deflection"].attrs = deflection_attrs()
    return ds
