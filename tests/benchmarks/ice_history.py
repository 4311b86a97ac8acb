"""Benchmark: 1000 steps of an ice history on a 512 x 512 grid, with uplift rates.

Two ways through the same steps (an ice cap growing then melting on land that slopes into
the sea, so floatation and the ocean load follow the bed and the load is transformed
again after most steps):

* ``IceStepper``: the coupling loop, ``advance`` then ``uplift_rate()`` at every step;
* ``ice_response``: the batch call on a history of ``steps + 1`` times, writing every
  time (``--all``) or every 100th (``output_times``; memory for all 1001 times of 512² is
  about 8.5 GB).

Prints the time per step against one FFT pair (rfft2 + irfft2) of the padded grid timed
in the same process, the totals (wall, and CPU of all the process's threads) against the
60 s target and the machine's load average (the machine is shared: timings are noisy,
ratios less so).

Run:  PYTHONPATH=. python tests/benchmarks/ice_history.py [steps] [n] [model] [--all]
      [--width=W]  (half-space padding per side in grid widths; default the library's)

Measured (half-space, 512², FFT grid 1024², machine loaded: load average 6.1 at the
start, 7.1 at the end; the FFT pair took 69.8 ms, 15-35 ms when the machine is quiet):
``IceStepper`` 1000 steps with rates 178.2 s (178 ms per step, 2.56 FFT pairs),
``ice_response`` writing 11 times 122.7 s (1.76 FFT pairs per step), the two final
deflections equal (0 m); again at load 4.0-5.3 (FFT pair 58.5 ms): 158.9 s (2.72 pairs,
CPU of all threads 93.5 s) and 109.3 s (1.87 pairs, CPU 66.5 s). 300-step runs against
the code before the in-place ice load, the wrapping and forward-transform changes,
alternated (load 6.8-8.1): ``IceStepper`` 2.66 / 3.17 FFT pairs per step before, 2.10 /
2.21 after; ``ice_response`` 1.88 / 2.48 before, 1.49 / 1.84 after (DEVELOPERS.md, ice
histories, lists the changes).

Quiet machine (load average about 1, FFT pair 21.2-21.7 ms), the same code with row blocks
taken by whichever thread is free: ``IceStepper`` 62.0 s (2.86 pairs per step, CPU 87.9 s),
``ice_response`` 44.4 s. The bed below is a transposed (column-major) array, and the ice
rule read it row block by row block at every step; with row-major copies of the bed and
the reference ice kept by the rule: ``IceStepper`` 52.5 s (52.5 ms per step, 2.48 pairs,
CPU 75.3 s; target 60 s met), ``ice_response`` 39.8 s (1.88 pairs), final deflections equal
(0 m), centre deflection unchanged (386.54 m).
"""

from __future__ import annotations

import os
import sys
import time

import numpy as np
import xarray as xr

from gridflex import IceStepper, Plate, ice_response
from gridflex.synthetic import disc_height, empty_grid
from tests.benchmarks.history import fft_pair_seconds


def main() -> None:
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    steps = int(args[0]) if args else 1000
    n = int(args[1]) if len(args) > 1 else 512
    model = args[2] if len(args) > 2 else "half-space"
    record_all = "--all" in sys.argv
    widths = [float(a.split("=", 1)[1]) for a in sys.argv[1:] if a.startswith("--width=")]
    padding = {"width_factor": widths[-1]} if widths else {}
    grid = empty_grid(n, n, 10e3)  # 5120 km square (invented)
    bed = (400.0 - 4e-4 * np.hypot(grid.x, grid.y)).transpose("y", "x")  # sea beyond 1000 km
    cap = disc_height(grid, 1200e3, 1.0, supersample=2).values
    plate = Plate.from_rigidity(1e25, infill_density=0.0)
    thickness = 3000.0 * np.sin(np.linspace(0.0, np.pi, steps + 1))
    levels = np.zeros(steps + 1)  # the ocean still floods the bed pushed below sea level
    dt = 10.0

    stepper = IceStepper(bed, plate, model, **padding)
    pair = fft_pair_seconds(stepper.stepper.padded_shape)
    print(f"load average at start: {os.getloadavg()[0]:.2f} (2 cores, shared)")
    print(f"model {model}, grid {n} x {n}, padded FFT grid {stepper.stepper.padded_shape}")
    print(f"one FFT pair of the padded grid (baseline): {pair * 1e3:8.2f} ms")
    start, cpu = time.perf_counter(), time.process_time()
    for k in range(1, steps + 1):
        stepper.advance(dt, thickness[k] * cap, levels[k])
        stepper.uplift_rate()
    total, cpu = time.perf_counter() - start, time.process_time() - cpu
    centre = float(stepper.deflection.values[n // 2, n // 2])
    print(
        f"IceStepper: {steps} steps with uplift rates {total:6.1f} s (target 60 s), "
        f"{total / steps * 1e3:7.2f} ms per step, ratio {total / steps / pair:5.2f} FFT pairs; "
        f"CPU {cpu:6.1f} s (all threads); centre deflection {centre:.2f} m"
    )

    times = dt * np.arange(steps + 1)
    history = xr.DataArray(
        thickness[:, None, None] * cap[None],
        dims=("time", "y", "x"),
        coords={"time": times, "y": grid.y, "x": grid.x},
    )
    wanted = times if record_all else np.union1d(times[::100], times[-1:])
    start, cpu = time.perf_counter(), time.process_time()
    out = ice_response(
        history,
        bed,
        plate,
        xr.DataArray(levels, dims="time"),
        model,
        output_times=None if record_all else wanted,
        **padding,
    )
    batch, cpu = time.perf_counter() - start, time.process_time() - cpu
    gap = float(np.abs(out.deflection.values[-1] - stepper.deflection.values).max())
    print(
        f"ice_response: {steps} steps, {wanted.size} times written, {batch:6.1f} s "
        f"(target 60 s), ratio {batch / steps / pair:5.2f} FFT pairs per step; CPU "
        f"{cpu:6.1f} s; final deflection against IceStepper {gap:.3g} m"
    )
    print(f"load average at end: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
