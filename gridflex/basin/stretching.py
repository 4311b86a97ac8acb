"""Uniform lithospheric stretching: initial and thermal subsidence (McKenzie 1978).

McKenzie (1978, *Earth Planet. Sci. Lett.* 40, 25-32): a lithosphere of thickness a
with a crust of thickness t_c, a linear geotherm from 0 at the surface to T_1 at its
base and densities rho(T) = rho_0 (1 - alpha T) (crust rho_c at 0 degC, mantle rho_m)
is stretched instantly by a factor beta: the crust thins to t_c / beta, the
lithosphere to a / beta, and asthenosphere at T_1 wells up beneath. Subsidence is
water-loaded and positive down (m).

**Initial subsidence** (isostatic balance of the stretched column against the
unstretched one, both down to a compensation depth in the asthenosphere; exact for
this column, McKenzie's closed form):

.. math:: S_i = \\frac{a \\left[(\\rho_m - \\rho_c)\\frac{t_c}{a}
          \\left(1 - \\frac{\\alpha T_1 t_c}{2a}\\right) - \\frac{\\alpha T_1 \\rho_m}{2}\\right]
          (1 - 1/\\beta)}{\\rho_m (1 - \\alpha T_1) - \\rho_w}

**Thermal subsidence.** The geotherm relaxes by the 1-D heat equation with T = 0 at
the surface and T = T_1 at depth a (re-derived here). With u = z / a, the initial
temperature is T_1 min(beta u, 1); its departure from the steady line T_1 u expands as

.. math:: T(z, t) = T_1 \\left[u + \\sum_{n \\ge 1} b_n \\sin(n \\pi u) e^{-n^2 t/\\tau}\\right],
          \\quad b_n = \\frac{2 \\beta \\sin(n\\pi/\\beta)}{(n\\pi)^2},
          \\quad \\tau = \\frac{a^2}{\\pi^2 \\kappa}.

Cooling in place adds the mass alpha rho (T(0) - T(t)) per volume; isostasy against
water gives S_t(t) = alpha / Delta * integral of rho (T(z, 0) - T(z, t)) dz. Two
treatments (``isostasy``):

* ``"mckenzie"`` (default) -- as published: the whole column cools with rho_m and
  Delta = rho_m - rho_w (first order in alpha T_1). Only odd n remain:

  .. math:: S_t(t) = E_0 \\sum_{n\\ \\mathrm{odd}} \\frac{\\beta}{n^3 \\pi}
            \\sin\\frac{n\\pi}{\\beta} \\left(1 - e^{-n^2 t/\\tau}\\right),
            \\quad E_0 = \\frac{4 a \\rho_m \\alpha T_1}{\\pi^2 (\\rho_m - \\rho_w)},

  whose first term is McKenzie's E_0 (beta / pi) sin(pi / beta) (1 - e^{-t/tau}), and
  S_t(inf) = a rho_m alpha T_1 (1 - 1/beta) / (2 (rho_m - rho_w)).
* ``"column"`` -- the column of the initial subsidence: the crust (depth < t_c / beta)
  cools with rho_c, the rest with rho_m, and Delta = rho_m (1 - alpha T_1) - rho_w (the
  asthenosphere the water replaces). Then S_i + S_t(inf) equals the equilibrium column
  exactly: lithosphere back to thickness a with a linear geotherm, crust t_c / beta,

  .. math:: S_\\infty = \\frac{(\\rho_m - \\rho_c)\\, t_c (1 - 1/\\beta)
            \\left[1 - \\alpha T_1 t_c (1 + 1/\\beta) / (2a)\\right]}
            {\\rho_m (1 - \\alpha T_1) - \\rho_w}.

  The published form misses this equilibrium by O(alpha T_1) of the thermal part (seen:
  about 3 % of S_inf at beta = 2 with the defaults).

The series is summed as S_t(inf) minus its decaying terms, truncated where the bound
of the rest falls below 1e-12 of a rho_m alpha T_1 / Delta per unit beta (at most
:data:`MAX_TERMS` terms, reached only for t below about 1 kyr; the error is then
below 1e-6 m per unit beta). At t = 0 it is exactly 0.

Defaults (Parsons & Sclater 1977, *J. Geophys. Res.* 82, 803-827, as used by McKenzie
1978; from memory): a = 125 km, T_1 = 1333 degC, alpha = 3.28e-5 /K, rho_m = 3330
kg m^-3, kappa = 8e-7 m^2 s^-1 (0.008 cm^2/s, giving McKenzie's tau = 62.8 Myr). The
crust: t_c = 35 km and rho_c = 2800 kg m^-3 (common practice for continental crust).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field, replace
from typing import Any

import numpy as np
import xarray as xr

from gridflex.constants import SECONDS_PER_YEAR
from gridflex.errors import InputError
from gridflex.io.provenance import provenance_attrs
from gridflex.validation import check_choice, check_density, check_number

__all__ = [
    "DEFAULT_CRUST_THICKNESS",
    "DEFAULT_THERMAL_DIFFUSIVITY",
    "ISOSTASY",
    "MAX_TERMS",
    "Stretching",
    "StretchingModel",
    "check_stretching_factor",
    "mckenzie_subsidence",
]

ISOSTASY = ("mckenzie", "column")
"""Accepted values of ``isostasy`` (see the module docstring)."""

DEFAULT_CRUST_THICKNESS = 35.0e3
"""Unstretched crustal thickness (m): common practice for continental crust."""

DEFAULT_THERMAL_DIFFUSIVITY = 8.0e-7
"""kappa (m^2 s^-1): 0.008 cm^2/s of Parsons & Sclater (1977), from memory; with a = 125 km
it gives McKenzie's (1978) tau = a^2 / (pi^2 kappa) = 62.7 Myr."""

MAX_TERMS = 2000
"""Largest number of series terms (reached only within about 1 kyr of rifting)."""

_SERIES_TOLERANCE = 1e-12
_BLOCK_ELEMENTS = 1 << 21  # values per block of the series sum (16 MB of float64)


def check_stretching_factor(name: str, value: Any) -> np.ndarray:
    """Stretching factors as a float array: finite and >= 1.

    Raises
    ------
    InputError
        Naming *name* and the first bad value.
    """
    try:
        beta = np.asarray(value.values if isinstance(value, xr.DataArray) else value, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} must be a number or an array of numbers, got {value!r}") from exc
    bad = ~np.isfinite(beta) | (beta < 1.0)
    if np.any(bad):
        first = beta[bad].flat[0]
        raise InputError(
            f"{name} must be finite and >= 1 (1 = no stretching); got {first!r}"
            + (f" in {int(bad.sum())} of {beta.size} values" if beta.ndim else "")
        )
    return beta


def _times(time: Any) -> np.ndarray:
    """Times since rifting (years) as a 0-d or 1-d float array: finite, >= 0."""
    try:
        t = np.asarray(time.values if isinstance(time, xr.DataArray) else time, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"time must be a number or a 1-D sequence of years since rifting, got {time!r}"
        ) from exc
    if t.ndim > 1:
        raise InputError(f"time must be a number or 1-D, got shape {t.shape}")
    bad = ~np.isfinite(t) | (t < 0.0)
    if np.any(bad):
        raise InputError(
            f"time must be finite and >= 0 (years since rifting); got {t[bad].flat[0]!r}"
        )
    return t


@dataclass(frozen=True)
class StretchingModel:
    """Parameters of the uniform-stretching model (McKenzie 1978); SI units, degC.

    Parameters
    ----------
    lithosphere_thickness : float, default 125e3
        a (m), also the depth of the fixed-temperature base.
    crust_thickness : float, default 35e3
        t_c (m), unstretched, 0 < t_c < a.
    mantle_temperature : float, default 1333.0
        T_1 (degC) at the base of the lithosphere.
    thermal_expansion : float, default 3.28e-5
        alpha (K^-1), volumetric.
    thermal_diffusivity : float, default 8e-7
        kappa (m^2 s^-1).
    mantle_density, crust_density, water_density : float
        rho_m, rho_c at 0 degC and rho_w (kg m^-3); 3330, 2800 and 1000 by default.
    isostasy : {"mckenzie", "column"}, default "mckenzie"
        How the thermal subsidence is balanced (module docstring).
    """

    lithosphere_thickness: float = 125.0e3
    crust_thickness: float = DEFAULT_CRUST_THICKNESS
    mantle_temperature: float = 1333.0
    thermal_expansion: float = 3.28e-5
    thermal_diffusivity: float = DEFAULT_THERMAL_DIFFUSIVITY
    mantle_density: float = 3330.0
    crust_density: float = 2800.0
    water_density: float = 1000.0
    isostasy: str = "mckenzie"

    def __post_init__(self) -> None:
        def set_(name: str, value: Any) -> None:
            object.__setattr__(self, name, value)

        a = check_number(
            "lithosphere_thickness", self.lithosphere_thickness, unit="m", minimum=0.0, strict=True
        )
        set_("lithosphere_thickness", a)
        tc = check_number(
            "crust_thickness", self.crust_thickness, unit="m", minimum=0.0, strict=True
        )
        if not tc < a:
            raise InputError(
                f"crust_thickness must be less than lithosphere_thickness ({a!r} m), got {tc!r}"
            )
        set_("crust_thickness", tc)
        set_(
            "mantle_temperature",
            check_number(
                "mantle_temperature", self.mantle_temperature, unit="degC", minimum=0.0, strict=True
            ),
        )
        set_(
            "thermal_expansion",
            check_number("thermal_expansion", self.thermal_expansion, unit="1/K", minimum=0.0),
        )
        set_(
            "thermal_diffusivity",
            check_number(
                "thermal_diffusivity",
                self.thermal_diffusivity,
                unit="m^2/s",
                minimum=0.0,
                strict=True,
            ),
        )
        for name in ("mantle_density", "crust_density", "water_density"):
            set_(name, check_density(name, getattr(self, name)))
        set_("isostasy", check_choice("isostasy", self.isostasy, ISOSTASY))
        hot = self.mantle_density * (1.0 - self.thermal_expansion * self.mantle_temperature)
        if not hot > self.water_density:
            raise InputError(
                f"water_density ({self.water_density:g} kg/m^3) must be less than the "
                f"asthenosphere's density rho_m (1 - alpha T_1) = {hot:g} kg/m^3"
            )

    @property
    def time_constant(self) -> float:
        """tau = a^2 / (pi^2 kappa), in years."""
        a, kappa = self.lithosphere_thickness, self.thermal_diffusivity
        return a * a / (math.pi**2 * kappa) / SECONDS_PER_YEAR

    @property
    def _hot_density(self) -> float:
        return self.mantle_density * (1.0 - self.thermal_expansion * self.mantle_temperature)

    @property
    def _thermal_denominator(self) -> float:
        if self.isostasy == "mckenzie":
            return self.mantle_density - self.water_density
        return self._hot_density - self.water_density

    @property
    def _crust_contrast(self) -> float:
        """rho_m - rho_c in the cooling crust: 0 for McKenzie's uniform rho_m."""
        return 0.0 if self.isostasy == "mckenzie" else self.mantle_density - self.crust_density

    def initial_subsidence(self, beta: np.ndarray) -> np.ndarray:
        """S_i (m, water-loaded, positive down) for stretching factors *beta* (>= 1)."""
        a, tc = self.lithosphere_thickness, self.crust_thickness
        rho_m, rho_c = self.mantle_density, self.crust_density
        at1 = self.thermal_expansion * self.mantle_temperature
        numerator = (rho_m - rho_c) * (tc / a) * (1.0 - at1 * tc / (2.0 * a)) - at1 * rho_m / 2.0
        return a * numerator * (1.0 - 1.0 / beta) / (self._hot_density - self.water_density)

    def thermal_subsidence(self, beta: np.ndarray, time: np.ndarray) -> np.ndarray:
        """S_t (m, water-loaded, positive down) at *time* (years since rifting, 1-D).

        Returns an array of shape ``beta.shape + time.shape``.
        """
        beta = np.asarray(beta, dtype=float)
        time = np.atleast_1d(np.asarray(time, dtype=float))
        flat = beta.reshape(-1)
        a = self.lithosphere_thickness
        rho_m, contrast = self.mantle_density, self._crust_contrast
        scale = self.thermal_expansion * self.mantle_temperature * a / self._thermal_denominator
        crust = self.crust_thickness / flat  # thinned crust (m)
        # S_t(inf) / scale: integral of (T(z, 0) - T_1 z / a) rho dz / (T_1 a)
        final = rho_m * (1.0 - 1.0 / flat) / 2.0 - contrast * (flat - 1.0) * crust**2 / (2 * a**2)
        s = time / self.time_constant
        terms = self._term_count(s)
        decaying = self._decaying_sum(flat, crust / a, s, terms)
        out = scale * (final[:, None] - decaying)
        out[:, s == 0.0] = 0.0
        return out.reshape(beta.shape + time.shape)

    def _term_count(self, s: np.ndarray) -> int:
        """Terms after which the rest of the decaying sum is below the tolerance (per
        unit beta, in units of a rho_m alpha T_1 / Delta)."""
        positive = s[s > 0.0]
        if positive.size == 0:
            return 0
        s_min = float(positive.min())
        # |b_n w_n| <= 4 beta (rho_m + |contrast|) / (n pi)^3; sum over n > N of the rest
        # (times exp(-n^2 s)) <= 2 beta (rho_m + |contrast|) exp(-(N+1)^2 s) / (pi^3 N^2)
        ratio = 1.0 + abs(self._crust_contrast) / self.mantle_density
        n = np.arange(1, MAX_TERMS + 1, dtype=float)
        bound = 2.0 * ratio * np.exp(-((n + 1.0) ** 2) * s_min) / (math.pi**3 * n**2)
        below = np.nonzero(bound <= _SERIES_TOLERANCE)[0]
        return int(n[below[0]]) if below.size else MAX_TERMS

    def _decaying_sum(
        self, beta: np.ndarray, crust_fraction: np.ndarray, s: np.ndarray, terms: int
    ) -> np.ndarray:
        """sum_n b_n w_n exp(-n^2 s) / rho-units, shape (beta.size, s.size)."""
        out = np.zeros((beta.size, s.size))
        if terms == 0 or beta.size == 0:
            return out
        odd_only = self._crust_contrast == 0.0
        n_all = np.arange(1, terms + 1, 2 if odd_only else 1, dtype=float)
        n_block = max(1, min(n_all.size, 256))
        c_block = max(1, _BLOCK_ELEMENTS // n_block)
        rho_m, contrast = self.mantle_density, self._crust_contrast
        for n0 in range(0, n_all.size, n_block):
            n = n_all[n0 : n0 + n_block]
            k = n * math.pi
            decay = np.exp(-np.outer(n * n, s))  # (terms, times)
            parity = rho_m * (1.0 - np.cos(k))  # 2 rho_m for odd n, 0 for even n
            for c0 in range(0, beta.size, c_block):
                b = beta[c0 : c0 + c_block, None]
                coefficient = 2.0 * b * np.sin(k / b) / k**2  # b_n
                weight = parity
                if contrast != 0.0:
                    h = crust_fraction[c0 : c0 + c_block, None]
                    weight = parity - contrast * (1.0 - np.cos(k * h))
                out[c0 : c0 + c_block] += (coefficient * weight / k) @ decay
        return out

    def describe(self) -> dict[str, Any]:
        """Parameters as output attributes."""
        out = asdict(self)
        out["time_constant_years"] = self.time_constant
        return out


def mckenzie_subsidence(
    stretching_factor: float | Sequence[float] | np.ndarray | xr.DataArray,
    time: float | Sequence[float] | np.ndarray,
    *,
    lithosphere_thickness: float = 125.0e3,
    crust_thickness: float = DEFAULT_CRUST_THICKNESS,
    mantle_temperature: float = 1333.0,
    thermal_expansion: float = 3.28e-5,
    thermal_diffusivity: float = DEFAULT_THERMAL_DIFFUSIVITY,
    mantle_density: float = 3330.0,
    crust_density: float = 2800.0,
    water_density: float = 1000.0,
    isostasy: str = "mckenzie",
) -> xr.Dataset:
    """Water-loaded subsidence of uniform lithospheric stretching (McKenzie 1978).

    Parameters
    ----------
    stretching_factor : float, array or xarray.DataArray
        beta (>= 1, finite); a DataArray keeps its dims and coordinates.
    time : float or 1-D sequence
        Years since rifting (>= 0).
    lithosphere_thickness, crust_thickness : float
        a and t_c (m); defaults 125 km (Parsons & Sclater 1977) and 35 km (common
        practice).
    mantle_temperature : float
        T_1 (degC), default 1333.
    thermal_expansion : float
        alpha (K^-1), default 3.28e-5.
    thermal_diffusivity : float
        kappa (m^2 s^-1), default 8e-7 (tau = 62.7 Myr).
    mantle_density, crust_density, water_density : float
        kg m^-3 (at 0 degC), defaults 3330, 2800, 1000.
    isostasy : {"mckenzie", "column"}
        ``"mckenzie"``: the thermal subsidence as published; ``"column"``: balanced on
        the same column as the initial subsidence (its t -> inf limit is the
        equilibrium column). See :mod:`gridflex.basin.stretching`.

    Returns
    -------
    xarray.Dataset
        ``initial_subsidence`` (m, dims of beta), ``thermal_subsidence`` and
        ``total_subsidence`` (m, dims of beta plus ``time`` when *time* is 1-D), all
        water-loaded and positive down; ``time`` coordinate in years since rifting;
        the parameters and ``time_constant_years`` as attributes.

    Raises
    ------
    InputError
        beta < 1 or not finite, a negative or non-finite time, bad parameters.

    Examples
    --------
    >>> out = mckenzie_subsidence(2.0, [0.0, 1e9])
    >>> round(float(out["initial_subsidence"]))
    2137
    >>> [round(float(v)) for v in out["thermal_subsidence"]]
    [0, 1953]
    """
    model = StretchingModel(
        lithosphere_thickness=lithosphere_thickness,
        crust_thickness=crust_thickness,
        mantle_temperature=mantle_temperature,
        thermal_expansion=thermal_expansion,
        thermal_diffusivity=thermal_diffusivity,
        mantle_density=mantle_density,
        crust_density=crust_density,
        water_density=water_density,
        isostasy=isostasy,
    )
    return model_subsidence(model, stretching_factor, time)


def model_subsidence(model: StretchingModel, stretching_factor: Any, time: Any) -> xr.Dataset:
    """:func:`mckenzie_subsidence` with the parameters of *model*."""
    beta = check_stretching_factor("stretching_factor", stretching_factor)
    t = _times(time)
    if isinstance(stretching_factor, xr.DataArray):
        template = stretching_factor.astype(float).copy(data=beta)
    else:
        template = xr.DataArray(beta)
    dims = template.dims + (("time",) if t.ndim else ())
    thermal = model.thermal_subsidence(beta, t)
    if not t.ndim:
        thermal = thermal.reshape(beta.shape)
    initial = model.initial_subsidence(beta)
    out = xr.Dataset(coords=template.coords)
    out["initial_subsidence"] = template.copy(data=initial)
    out["thermal_subsidence"] = (dims, thermal)
    out["total_subsidence"] = out["initial_subsidence"] + out["thermal_subsidence"]
    out = out.assign_coords(time=(("time",) if t.ndim else (), t))
    long_names = {
        "initial_subsidence": "initial (syn-rift) subsidence, water-loaded (positive down)",
        "thermal_subsidence": "thermal (post-rift) subsidence since rifting, water-loaded "
        "(positive down)",
        "total_subsidence": "initial plus thermal subsidence, water-loaded (positive down)",
    }
    for name, long_name in long_names.items():
        out[name].attrs = {"units": "m", "long_name": long_name}
    out["time"].attrs = {"units": "years since rifting"}
    attrs = {"sign_convention": "subsidence positive downward", **model.describe()}
    out.attrs = provenance_attrs(
        {}, attrs, "uniform lithospheric stretching (McKenzie 1978, EPSL 40, 25-32)"
    )
    return out


@dataclass(frozen=True)
class Stretching:
    """A rift under a staged basin: where and when the lithosphere was stretched.

    Parameters
    ----------
    stretching_factor : float or xarray.DataArray
        beta (>= 1): one number, or a grid on the basin's grid.
    rift_age : float
        Age of the (instantaneous) stretching, years before present.
    model : StretchingModel, optional
        The lithosphere; its ``mantle_density`` and ``water_density`` are replaced by
        the plate's and the basin's when a basin uses it (:meth:`for_densities`).

    Notes
    -----
    :meth:`subsidence` is the water-loaded tectonic subsidence S(age) of the model,
    initial plus thermal, 0 before *rift_age*. :class:`gridflex.basin.StagedBasin`
    turns the change of S between two stages into a load on the plate,
    q = (rho_m - rho_w) g dS: the load under which a column without strength (te = 0),
    covered by water, sinks by exactly dS (local isostasy). It is then flexed with the
    stage's plate (te) and infill, so a plate with strength spreads the tectonic
    subsidence of a varying beta, and sediment fill deepens it (common practice in
    forward basin models: local tectonic subsidence as an equivalent load).
    """

    stretching_factor: float | xr.DataArray
    rift_age: float
    model: StretchingModel = field(default_factory=StretchingModel)

    def __post_init__(self) -> None:
        if isinstance(self.stretching_factor, xr.DataArray):
            check_stretching_factor("stretching_factor", self.stretching_factor)
        else:
            beta = check_stretching_factor("stretching_factor", self.stretching_factor)
            if beta.ndim:
                raise InputError(
                    "stretching_factor must be a number or an xarray.DataArray grid, "
                    f"got an array of shape {beta.shape}"
                )
            object.__setattr__(self, "stretching_factor", float(beta))
        age = check_number("rift_age", self.rift_age, unit="years before present")
        object.__setattr__(self, "rift_age", age)
        if not isinstance(self.model, StretchingModel):
            raise InputError(
                f"model must be a gridflex.basin.StretchingModel, got {type(self.model).__name__}"
            )

    def for_densities(self, mantle_density: float, water_density: float) -> Stretching:
        """The same rift with the model's mantle and water densities replaced."""
        model = replace(self.model, mantle_density=mantle_density, water_density=water_density)
        return replace(self, model=model)

    def subsidence(self, age: float, values: np.ndarray | None = None) -> np.ndarray:
        """Water-loaded tectonic subsidence (m, positive down) at *age* (years before present).

        Parameters
        ----------
        age : float
            Years before present; before :attr:`rift_age` the subsidence is 0.
        values : numpy.ndarray, optional
            The stretching factors to use (e.g. the grid's values already aligned
            with a basin); default :attr:`stretching_factor`.
        """
        initial, thermal = self.subsidence_parts(age, values)
        return initial + thermal

    def subsidence_parts(
        self, age: float, values: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """Initial and thermal parts of :meth:`subsidence` (m), each 0 before the rift."""
        beta = np.asarray(
            self.stretching_factor.values
            if values is None and isinstance(self.stretching_factor, xr.DataArray)
            else (self.stretching_factor if values is None else values),
            dtype=float,
        )
        time = self.rift_age - float(age)
        if time < 0.0:
            return np.zeros(beta.shape), np.zeros(beta.shape)
        thermal = self.model.thermal_subsidence(beta, np.array([time]))[..., 0]
        return np.asarray(self.model.initial_subsidence(beta), dtype=float), thermal

    def describe(self) -> dict[str, Any]:
        """Parameters as output attributes (prefix ``stretching_``)."""
        beta = self.stretching_factor
        out: dict[str, Any] = {
            "stretching_factor": "grid" if isinstance(beta, xr.DataArray) else beta,
            "stretching_rift_age": self.rift_age,
        }
        out.update({f"stretching_{k}": v for k, v in self.model.describe().items()})
        return out
