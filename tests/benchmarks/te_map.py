"""te maps: window size against resolution and bias, interval coverage, cost.

Synthetic plates of Forsyth's (1985) two-load model (tests/helpers.two_load_plate: red,
uncorrelated surface and Moho loads, f = 1; 256² cells of 30 km, periodic):

1. Uniform plates (te 10, 25, 40 km; spectral solve), several seeds: for each window size
   the median and spread of te / truth - 1 over all windows, and the share of windows whose
   interval holds the truth.
2. A plate of te 10 km (x < 3840 km) and 40 km (x >= 3840 km), solved by finite
   differences on the te grid three times finer (block means; on 30 km cells the
   finite-difference 10 km plate is about a 9 km plate), seeds 101, 102, ... (the tests
   use others): the error, the interval coverage (share of windows whose interval holds
   the truth, pooled and per seed) and the median interval width over each domain's
   interior windows, and the width of the step in the map (distance over which the
   row-median te rises from a quarter to three quarters of its own rise), i.e. the map's
   resolution; for the default (prewhitened, jackknifed), without the jackknife, and
   without either (the te map before both). Cost: the default against the same maps
   without the jackknife (same process).
3. (``--methods``) The uniform plates of 1. mapped by the fan wavelet, and the same
   two-domain plates (same seeds) mapped by both methods of ``te_map``
   (``method="multitaper"`` and ``"fan_wavelet"``, defaults otherwise, centres every
   300 km; for the fan wavelet *window* is the longest equivalent wavelength, and the
   interior is the same: points at least half a window from the step and the edges):
   the error, coverage and interval width in each domain's interior, the step width and
   the time of each map.

Writes te_map_benchmark.png (window size against resolution and bias) into OUTPUT_DIR
(with ``--methods``: only part 3, and te_map_methods.png).
Run: PYTHONPATH=. python tests/benchmarks/te_map.py [OUTPUT_DIR] [seeds] [--methods]
"""

from __future__ import annotations

import sys
import time
import warnings
from pathlib import Path

import numpy as np
import xarray as xr

import gridflex
from gridflex.estimation.likelihood import OpenIntervalWarning
from tests.helpers import two_load_plate

N, DX = 256, 30e3
WINDOWS = (1200e3, 1800e3, 2400e3, 3600e3)
PLATE = gridflex.Plate(te=0.0, crust_thickness=35e3)
METHOD_WINDOWS = (1200e3, 2400e3)
"""Windows of the comparison of the methods (part 3)."""
SEEDS_FROM = 101
"""First seed of the two-domain plates (the tests use other seeds)."""


def quiet_map(topography: xr.DataArray, bouguer: xr.DataArray, **options) -> xr.Dataset:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", OpenIntervalWarning)
        return gridflex.te_map(topography, bouguer, PLATE, **options)


def uniform(
    seeds: int, method: str = "multitaper", windows: tuple[float, ...] = WINDOWS
) -> dict[float, list[float]]:
    """Median error (%) of every window size, per true te."""
    print(
        f"1. uniform plates ({method}): te / truth - 1 over all windows (median, 10-90 %), coverage"
    )
    medians: dict[float, list[float]] = {}
    for truth in (10e3, 25e3, 40e3):
        data = [two_load_plate(truth, N, DX, seed=s, plate=PLATE) for s in range(seeds)]
        for window in windows:
            errors, hits = [], []
            for topography, bouguer in data:
                result = quiet_map(
                    topography, bouguer, window=window, step=window / 2, method=method
                )
                errors.append((result["te"].values / truth - 1).ravel())
                hits.append(
                    ((result["te_low"] <= truth) & (truth <= result["te_high"])).values.ravel()
                )
            e, h = 100 * np.concatenate(errors), np.concatenate(hits)
            medians.setdefault(truth, []).append(float(np.median(e)))
            print(
                f"   te {truth / 1e3:4.0f} km, window {window / 1e3:5.0f} km: median "
                f"{np.median(e):+6.1f} %, 10-90 % {np.percentile(e, 10):+6.1f} to "
                f"{np.percentile(e, 90):+6.1f} %, coverage {h.mean():.2f} ({h.size} windows)"
            )
    return medians


def step_width(x: np.ndarray, te: np.ndarray, split: float, window: float) -> float:
    """Distance (m) over which a rising profile goes from a quarter to three quarters of
    its own rise (between its plateaus, a window or more from the step): the resolution,
    apart from the bias of each plateau."""
    order = np.argsort(x)
    x, te = x[order], te[order]
    low = np.median(te[x <= split - window / 2]) if np.any(x <= split - window / 2) else te[0]
    high = np.median(te[x >= split + window / 2]) if np.any(x >= split + window / 2) else te[-1]
    rising = np.maximum.accumulate(te)
    ends = [float(np.interp(low + share * (high - low), rising, x)) for share in (0.25, 0.75)]
    return ends[1] - ends[0]


def two_domains(seeds: int) -> dict[float, tuple[np.ndarray, np.ndarray]]:
    print(
        "2. te 10 | 40 km (finite differences on cells three times finer, block means; step "
        f"at x = 3840 km), seeds {SEEDS_FROM}..{SEEDS_FROM + seeds - 1}"
    )
    x = np.arange(N) * DX
    split = N // 2 * DX
    te = np.where(x < split, 10e3, 40e3)[None, :] * np.ones((N, 1))
    start = time.perf_counter()
    data = [
        two_load_plate(te, N, DX, seed=SEEDS_FROM + s, plate=PLATE, refine=3) for s in range(seeds)
    ]
    print(f"   synthetics: {(time.perf_counter() - start) / seeds:.2f} s each")
    profiles = {}
    variants = {
        "default": {},
        "no jackknife": {"jackknife": False},
        "no jackknife, no prewhitening": {"jackknife": False, "prewhiten": False},
    }
    for window in WINDOWS:
        times: dict[str, float] = {}
        for name, options in variants.items():
            elapsed, rows, results = 0.0, [], []
            for topography, bouguer in data:
                start = time.perf_counter()
                result = quiet_map(topography, bouguer, window=window, step=300e3, **options)
                elapsed += time.perf_counter() - start
                xc = result["x"].values
                rows.append(np.median(result["te"].values, axis=0))
                results.append(result)
            line, _ = domain_lines(results, window, split)
            if name == "default":
                median_profile = np.median(rows, axis=0)
                width = step_width(xc, median_profile, split, window)
                profiles[window] = (xc, median_profile)
                line.append(f"step width {width / 1e3:.0f} km")
            times[name] = elapsed
            if name == "no jackknife":
                line.append(f"the default takes x {times['default'] / elapsed:.2f} this time")
            print(f"   window {window / 1e3:5.0f} km, {name}: {'; '.join(line)}; {elapsed:.1f} s")
    return profiles


def domain_lines(
    results: list[xr.Dataset], window: float, split: float
) -> tuple[list[str], dict[float, np.ndarray]]:
    """Error, coverage and interval width over each domain's interior points (all maps)."""
    found: dict[float, list[np.ndarray]] = {}
    for result in results:
        xc = result["x"].values
        for low, high, truth in ((0.0, split, 10e3), (split, N * DX, 40e3)):
            inside = (xc - window / 2 >= low) & (xc + window / 2 <= high)
            if inside.any():
                te_w, lo, hi = (
                    result[v].values[:, inside].ravel() for v in ("te", "te_low", "te_high")
                )
                found.setdefault(truth, []).append(
                    np.stack([te_w / truth - 1, (lo <= truth) & (truth <= hi), (hi - lo) / te_w])
                )
    lines, pooled = [], {}
    for truth in (10e3, 40e3):
        if truth not in found:
            lines.append(f"te {truth / 1e3:.0f}: no interior point")
            continue
        per_seed = [f[1].mean() for f in found[truth]]
        pooled[truth] = err, hit, width = np.concatenate(found[truth], axis=1)
        lines.append(
            f"te {truth / 1e3:.0f}: median {100 * np.median(err):+.1f} % "
            f"(10-90 % {100 * np.percentile(err, 10):+.0f}..{100 * np.percentile(err, 90):+.0f}, "
            f"within 25 %: {np.mean(np.abs(err) <= 0.25):.2f}), coverage {hit.mean():.2f} "
            f"(per seed {min(per_seed):.2f}..{max(per_seed):.2f}), median width "
            f"{np.median(width):.2f} te"
        )
    return lines, pooled


def methods(seeds: int) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    print(f"3. multitaper against fan wavelet, te 10 | 40 km, seeds {SEEDS_FROM}..")
    x = np.arange(N) * DX
    split = N // 2 * DX
    te = np.where(x < split, 10e3, 40e3)[None, :] * np.ones((N, 1))
    data = [
        two_load_plate(te, N, DX, seed=SEEDS_FROM + s, plate=PLATE, refine=3) for s in range(seeds)
    ]
    profiles = {}
    for window in METHOD_WINDOWS:
        for method in ("multitaper", "fan_wavelet"):
            results, elapsed = [], 0.0
            for topography, bouguer in data:
                start = time.perf_counter()
                results.append(
                    quiet_map(topography, bouguer, window=window, step=300e3, method=method)
                )
                elapsed += time.perf_counter() - start
            lines, _ = domain_lines(results, window, split)
            xc = results[0]["x"].values
            median_profile = np.median([np.median(r["te"].values, axis=0) for r in results], 0)
            profiles[f"{method}, {window / 1e3:.0f} km"] = (xc, median_profile)
            lines.append(f"step width {step_width(xc, median_profile, split, window) / 1e3:.0f} km")
            lines.append(f"{elapsed / seeds:.1f} s a map")
            print(f"   {method:11s} window {window / 1e3:5.0f} km: {'; '.join(lines)}")
            print(f"      row-median profile (km): {np.round(median_profile / 1e3, 1).tolist()}")
    return profiles


def plot(out: Path, medians: dict[float, list[float]], profiles: dict) -> Path:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, (left, right) = plt.subplots(1, 2, figsize=(12, 4.8), constrained_layout=True)
    x = np.arange(N) * DX
    truth = np.where(x < N // 2 * DX, 10.0, 40.0)
    left.plot(x / 1e3, truth, "k-", lw=2, label="truth")
    for window, (xc, te) in profiles.items():
        left.plot(xc / 1e3, te / 1e3, "o-", ms=3, label=f"window {window / 1e3:.0f} km")
    left.set_xlabel("x (km)")
    left.set_ylabel("te, median over rows (km)")
    left.set_title("resolution: the 10 | 40 km step")
    left.legend(fontsize="small")
    for te, values in medians.items():
        right.plot(np.array(WINDOWS) / 1e3, values, "o-", label=f"te {te / 1e3:.0f} km")
    right.axhline(0.0, color="k", lw=0.8)
    right.set_xlabel("window (km)")
    right.set_ylabel("median te error (%)")
    right.set_title("bias: uniform plates")
    right.legend(fontsize="small")
    path = out / "te_map_benchmark.png"
    fig.savefig(path, dpi=110)
    return path


def plot_methods(out: Path, profiles: dict) -> Path:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(7, 4.5), constrained_layout=True)
    x = np.arange(N) * DX
    ax.plot(x / 1e3, np.where(x < N // 2 * DX, 10.0, 40.0), "k-", lw=2, label="truth")
    for name, (xc, te) in profiles.items():
        ax.plot(xc / 1e3, te / 1e3, "o-", ms=3, label=name)
    ax.set_xlabel("x (km)")
    ax.set_ylabel("te, median over rows and seeds (km)")
    ax.set_title("multitaper against fan wavelet: the 10 | 40 km step")
    ax.legend(fontsize="small")
    path = out / "te_map_methods.png"
    fig.savefig(path, dpi=110)
    return path


def main(out: Path, seeds: int) -> None:
    out.mkdir(parents=True, exist_ok=True)
    if "--methods" in sys.argv:
        uniform(seeds, "fan_wavelet", METHOD_WINDOWS)
        print("wrote", plot_methods(out, methods(seeds)))
        return
    medians = uniform(seeds)
    profiles = two_domains(seeds)
    print("wrote", plot(out, medians, profiles))


if __name__ == "__main__":
    args = [a for a in sys.argv[1:] if a != "--methods"]
    main(Path(args[0]) if args else Path("."), int(args[1]) if len(args) > 1 else 2)
