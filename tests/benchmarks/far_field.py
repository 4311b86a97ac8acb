"""Benchmark: cost of the far-field split and of the elastic Earth per stepper advance.

Times, interleaved round by round in one process (the machine is shared, so separate runs
drift): one FFT pair (rfft2 + irfft2) of the padded grid, and one ``advance`` of the
half-space stepper with the far-field split (the default), without it (the periodic
k = 0 mode of before issue 17) and with ``elastic=True``. Prints median times and their
ratios to the FFT pair.

Run:  PYTHONPATH=. python tests/benchmarks/far_field.py [rounds] [n]
"""

from __future__ import annotations

import sys
import time

import numpy as np
import scipy.fft

from gridflex import Plate, ResponseStepper
from gridflex.synthetic import disc_height, empty_grid


def main() -> None:
    rounds = int(sys.argv[1]) if len(sys.argv) > 1 else 20
    n = int(sys.argv[2]) if len(sys.argv) > 2 else 512
    grid = empty_grid(n, n, 10e3)  # invented: a 1500 km ice cap on 10 km cells
    cap = disc_height(grid, 1500e3, 1.0, supersample=2).values * (910.0 * 9.81)
    plate = Plate.from_rigidity(1e25, infill_density=0.0)
    steppers = {
        "advance, far-field split (default)": ResponseStepper(grid, plate),
        "advance, without the split": ResponseStepper(grid, plate),
        "advance, elastic=True": ResponseStepper(grid, plate, elastic=True),
    }
    steppers["advance, without the split"]._engine.far = None  # type: ignore[union-attr]
    shape = steppers["advance, far-field split (default)"].padded_shape
    data = np.random.default_rng(0).normal(size=shape)
    times: dict[str, list[float]] = {"FFT pair of the padded grid": []}
    times.update({name: [] for name in steppers})
    for stepper in steppers.values():  # warm-up: step factors cached
        stepper.advance(10.0, cap)
    for k in range(rounds):
        start = time.perf_counter()
        spectrum = scipy.fft.rfft2(data, workers=-1)
        scipy.fft.irfft2(spectrum, s=shape, workers=-1)
        times["FFT pair of the padded grid"].append(time.perf_counter() - start)
        load = cap * (1000.0 + 10.0 * k)
        for name, stepper in steppers.items():
            start = time.perf_counter()
            stepper.advance(10.0, load)
            times[name].append(time.perf_counter() - start)
    base = float(np.median(times["FFT pair of the padded grid"]))
    print(f"grid {n} x {n}, padded FFT grid {shape[0]} x {shape[1]}, {rounds} rounds")
    for name, values in times.items():
        median = float(np.median(values))
        print(f"{name:40s} {median * 1e3:9.2f} ms  ratio {median / base:5.2f}")


if __name__ == "__main__":
    main()
