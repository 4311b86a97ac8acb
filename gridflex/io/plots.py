"""Pictures of results (matplotlib, PNG, written atomically).

matplotlib is imported with the non-interactive Agg backend inside each function,
so importing gridflex never opens a window. Signed fields (deflection, anomalies)
use a diverging colour map centred on zero; one-signed fields (fill thickness) a
perceptually uniform sequential one.

Every plot takes ``path`` (the PNG file), ``overwrite`` (replace an existing file,
default False), ``inputs`` (files never to be overwritten) and most a ``title``;
each returns the path written.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import xarray as xr

from gridflex.io.atomic import atomic_path

if TYPE_CHECKING:  # type hints only: plots sits below fitting in the import floors
    from gridflex.estimation.admittance import SpectralFit
    from gridflex.estimation.misfit import TeFit
    from gridflex.estimation.misfit_te_maps import TeMapFit

__all__ = [
    "plot_deflection_map",
    "plot_field_map",
    "plot_horizon_section",
    "plot_misfit",
    "plot_point_series",
    "plot_profile",
    "plot_profiles",
    "plot_spectral_fit",
    "plot_uplift_rate_map",
]

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


def _curve_axes() -> tuple[Any, Any]:
    """A figure with one set of axes for curves."""
    return _pyplot().subplots(figsize=(6.4, 4.2), constrained_layout=True)


def _finish_curve(
    fig: Any, ax: Any, title: str, path: str | Path, overwrite: bool, inputs: Paths
) -> Path:
    """Title and legend on *ax*, then the figure written to *path*."""
    ax.set_title(title, fontsize=10)
    ax.legend(loc="best", fontsize="small")
    return _save(fig, path, overwrite, inputs)


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
        mesh = ax.pcolormesh(
            x,
            y,
            values,
            shading="nearest",
            cmap="RdBu_r",
            norm=TwoSlopeNorm(vmin=-low, vcenter=0.0, vmax=high),
        )
        ticks = np.unique(np.concatenate([[-low, 0.0], np.linspace(0.0, high, 6)]))
        levels = np.linspace(0.0, high, contours + 2)[1:-1]
        if bottom < 0 < top:
            ax.contour(x, y, values, levels=[0.0], colors="0.1", linewidths=0.9, linestyles="--")
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
        result["deflection"],
        path,
        f"{title}\nred: depressed (moat), blue: uplifted (forebulge); dashed: zero; "
        "black: load outline",
        "deflection (m, positive down)",
        overwrite,
        inputs,
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
        Output of :func:`gridflex.results.profile.sample_profile` with ``deflection`` and,
        when present, ``load`` (Pa) and ``surface`` (m).
    path : str or pathlib.Path
        PNG file.
    """
    plt = _pyplot()
    km = profile["distance"].values / 1e3
    fig, (top, bottom) = plt.subplots(
        2, 1, figsize=(8.0, 6.0), sharex=True, constrained_layout=True, height_ratios=(1, 2)
    )
    if "load" in profile:
        top.fill_between(km, profile["load"].values / 1e6, color="0.55", linewidth=0)
        top.set_ylabel("load (MPa)")
    top.set_title(title, fontsize=10)
    bottom.plot(
        km,
        -profile["deflection"].values,
        color="tab:red",
        label="plate top displacement (−deflection)",
    )
    if "surface" in profile:
        bottom.plot(km, profile["surface"].values, color="tab:blue", label="final surface")
    bottom.axhline(0.0, color="0.3", linewidth=0.7, linestyle="--")
    bottom.set_ylabel("height (m, positive up)")
    bottom.set_xlabel("distance along the profile (km)")
    bottom.legend(loc="best", fontsize=8)
    return _save(fig, path, overwrite, inputs)


def plot_horizon_section(
    sections: list[tuple[float, xr.Dataset]],
    path: str | Path,
    overwrite: bool = False,
    inputs: Paths = (),
    title: str = "Horizons along the section",
) -> Path:
    """Cross-sections of a basin's horizons at chosen ages, one panel per age.

    Parameters
    ----------
    sections : list of (float, xarray.Dataset)
        Age (years before present) and the profile at that age
        (:func:`gridflex.results.profile.sample_profile`) with ``basement_depth`` on
        ``distance`` and ``horizon_depth`` on ``(distance, horizon)`` (m below sea
        level, positive down; NaN for horizons not yet deposited), ``horizon_age`` on
        ``horizon``.
    path : str or pathlib.Path
        PNG file.

    Returns
    -------
    pathlib.Path
    """
    plt = _pyplot()
    fig, axes = plt.subplots(
        len(sections),
        1,
        figsize=(8.0, 2.0 + 2.4 * len(sections)),
        sharex=True,
        squeeze=False,
        constrained_layout=True,
    )
    colours = plt.get_cmap("viridis")
    for ax, (age, section) in zip(axes[:, 0], sections, strict=True):
        km = section["distance"].values / 1e3
        lower = section["basement_depth"].values
        tops = section["horizon_depth"].transpose("horizon", "distance").values
        ages = section["horizon_age"].values
        count = max(len(ages), 1)
        for k in range(len(ages)):
            top = tops[k]
            if np.isnan(top).all():
                continue
            ax.fill_between(km, lower, top, color=colours(k / count), alpha=0.8, linewidth=0)
            ax.plot(km, top, color="0.15", linewidth=0.7)
            lower = top
        ax.plot(km, section["basement_depth"].values, color="k", linewidth=1.2, label="basement")
        ax.axhline(0.0, color="tab:blue", linewidth=0.8, linestyle="--", label="sea level")
        ax.invert_yaxis()
        ax.set_ylabel("depth (m, positive down)")
        ax.set_title(f"{title}: {age / 1e6:g} Myr", fontsize=10)
    handles = [
        plt.Rectangle((0, 0), 1, 1, color=colours(k / max(len(ages), 1)))
        for k in range(len(sections[-1][1]["horizon_age"]))
    ]
    labels = [f"stage of {a / 1e6:g} Myr" for a in sections[-1][1]["horizon_age"].values]
    axes[0, 0].legend(handles, labels, loc="best", fontsize=7)
    axes[-1, 0].set_xlabel("distance along the section (km)")
    return _save(fig, path, overwrite, inputs)


def plot_uplift_rate_map(
    rate: xr.DataArray,
    path: str | Path,
    overwrite: bool = False,
    inputs: Paths = (),
    title: str = "Uplift rate",
    outline: xr.DataArray | None = None,
) -> Path:
    """Map of an uplift rate (m/yr, positive up) in mm/yr: red rising (rebound), blue
    sinking, dashed zero line, black outline of *outline* (e.g. the ice thickness)."""
    has_outline = outline is not None and float(outline.max()) > 0
    legend = "red: rising (rebound), blue: sinking; dashed: zero"
    return plot_field_map(
        rate * 1e3,
        path,
        f"{title}\n{legend}" + ("; black: ice margin" if has_outline else ""),
        "uplift rate (mm/yr, positive up)",
        overwrite,
        inputs,
        outline=outline if has_outline else None,
    )


def plot_point_series(
    times: np.ndarray,
    series: dict[str, tuple[np.ndarray, np.ndarray]],
    path: str | Path,
    overwrite: bool = False,
    inputs: Paths = (),
    title: str = "Deflection and uplift rate at named points",
    time_label: str = "time (years)",
) -> Path:
    """Vertical displacement (top) and uplift rate (bottom) through time at named points.

    Parameters
    ----------
    times : numpy.ndarray
        Times (years).
    series : dict
        ``{name: (deflection m positive down, uplift rate m/yr)}`` along *times*.
    path : str or pathlib.Path
        PNG file.
    """
    plt = _pyplot()
    fig, (top, bottom) = plt.subplots(
        2, 1, figsize=(8.0, 6.5), sharex=True, constrained_layout=True
    )
    for name, (deflection, rate) in series.items():
        top.plot(times, -np.asarray(deflection), marker=".", label=name)
        bottom.plot(times, np.asarray(rate) * 1e3, marker=".", label=name)
    for ax in (top, bottom):
        ax.axhline(0.0, color="0.3", linewidth=0.7, linestyle="--")
    top.set_ylabel("vertical displacement (m, up)")
    bottom.set_ylabel("uplift rate (mm/yr)")
    bottom.set_xlabel(time_label)
    top.legend(loc="best", fontsize=8)
    top.set_title(title, fontsize=10)
    return _save(fig, path, overwrite, inputs)


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
    overwrite, inputs, title
        As for every plot here (see the module notes).

    Returns
    -------
    pathlib.Path
    """
    fig, ax = _curve_axes()
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
    return _finish_curve(fig, ax, title, path, overwrite, inputs)


def plot_profiles(
    fit: TeMapFit,
    path: str | Path,
    overwrite: bool = False,
    inputs: Iterable[str | Path] = (),
    title: str = "Profile likelihood of the fitted parameters",
) -> Path:
    """The profile of each fitted parameter of a te-map fit, with its interval.

    One panel per parameter: the scaled misfit increase (RSS - RSS_min) n_eff / (n s²)
    of its profile (the other parameters re-fitted) against its value (km, or the
    factor), the chi-squared quantile that ends the interval, the interval and the best
    value.

    Parameters
    ----------
    fit : gridflex.MarginFit or gridflex.ScaleFit
        Result of :func:`gridflex.fit_te_margin` or :func:`gridflex.fit_te_scale`.
    path : str or pathlib.Path
        PNG file.
    overwrite, inputs, title
        As for every plot here (see the module notes).

    Returns
    -------
    pathlib.Path
    """
    estimates = fit.estimates
    fig, axes = _pyplot().subplots(
        1, len(estimates), figsize=(3.6 * len(estimates) + 0.8, 3.8), constrained_layout=True
    )
    for ax, (name, estimate) in zip(np.atleast_1d(axes), estimates.items(), strict=True):
        factor, unit = (1e3, "km") if estimate.unit == "m" else (1.0, estimate.unit)
        values = estimate.profile[name].values / factor
        # the points evaluated (few, near the ends): markers, not a curve between them
        ax.plot(values, estimate.profile.values, "o", ms=4, color="0.2", label="profile")
        ax.axhline(fit.quantile, color="0.5", ls="--", lw=0.8, label="interval threshold")
        ax.axvspan(
            estimate.low / factor,
            estimate.high / factor,
            color="tab:blue",
            alpha=0.2,
            label=f"{fit.confidence:.0%} interval",
        )
        ax.axvline(estimate.value / factor, color="tab:blue", label="best")
        ax.set_xlabel(f"{name} ({unit})" if unit != "1" else name)
        ax.set_ylabel("(RSS - RSS_min) n_eff / (n s²)")
        ax.set_title(
            f"{name} = {estimate.value / factor:.4g} [{estimate.low / factor:.4g}, "
            f"{estimate.high / factor:.4g}]",
            fontsize=9,
        )
    np.atleast_1d(axes)[0].legend(loc="best", fontsize="small")
    fig.suptitle(title, fontsize=10)
    return _save(fig, path, overwrite, inputs)


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
    fit : gridflex.estimation.admittance.SpectralFit
        Result of :func:`gridflex.estimation.admittance.fit_te_spectral`.
    path : str or pathlib.Path
        PNG file.
    overwrite, inputs, title
        As for every plot here (see the module notes).

    Returns
    -------
    pathlib.Path
    """
    fig, ax = _curve_axes()
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
    return _finish_curve(fig, ax, title, path, overwrite, inputs)


def plot_te_map(
    result: xr.Dataset,
    path: str | Path,
    overwrite: bool = False,
    inputs: Paths = (),
    title: str = "Elastic thickness",
) -> Path:
    """Map of ``te`` beside the width of its interval (``te_high - te_low``), in km.

    Parameters
    ----------
    result : xarray.Dataset
        Output of :func:`gridflex.te_map` (``te``, ``te_low``, ``te_high`` in m).
    path : str or pathlib.Path
        PNG file.
    overwrite : bool, default False
        Replace an existing file.
    inputs : iterable of path
        Files never to be overwritten.
    title : str
        Title of the figure.

    Returns
    -------
    pathlib.Path
    """
    plt = _pyplot()
    x, y, xlabel, ylabel, aspect = _axes_coordinates(result)
    confidence = result.attrs.get("confidence")
    share = f"{float(confidence):.0%} " if confidence is not None else ""
    panels = (
        (result["te"].values / 1e3, "te (km)", "viridis"),
        (
            (result["te_high"].values - result["te_low"].values) / 1e3,
            f"width of the {share}interval (km)",
            "magma",
        ),
    )
    fig, axes = plt.subplots(1, 2, figsize=(12.0, 5.2), constrained_layout=True)
    for ax, (values, label, cmap) in zip(axes, panels, strict=True):
        mesh = ax.pcolormesh(x, y, values, shading="nearest", cmap=cmap)
        fig.colorbar(mesh, ax=ax, shrink=0.85, format="%.3g").set_label(label)
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
        ax.set_aspect(aspect)
    fig.suptitle(title, fontsize=10)
    return _save(fig, path, overwrite, inputs)
