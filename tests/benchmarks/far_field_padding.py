"""Benchmark: how much half-space padding the far-field split needs.

Three invented loads on a 96 x 96 grid of 25 km cells (2400 km square) — a disc filling
most of the grid, an off-centre ellipse with a small disc near a corner, and a strip
reaching two edges — are switched on at t = 0 over a plate of D = 1e24 N m. For each
padding (``width_factor``, grid widths per side) the deflection and uplift rate at
1 yr to 100 kyr are compared with the same stepper padded four widths per side.

Printed per time: ``w`` and ``r``, the largest deflection and rate differences over the
peak of the reference; ``p``, the largest pointwise rate difference relative to the
reference where its rate is at least a tenth of its peak. These are the numbers quoted
in :mod:`gridflex.solvers.far_field` (``CUTOFF_CYCLES``) and behind the default
``width_factor``.

Run:  PYTHONPATH=. python tests/benchmarks/far_field_padding.py [width_factor ...]
"""

from __future__ import annotations

import sys

import numpy as np

from gridflex import Plate, ResponseStepper
from gridflex.synthetic import disc_height, empty_grid

TIMES = (1.0, 10.0, 100.0, 1e3, 1e4, 1e5)  # years
REFERENCE = 4.0


def _loads() -> dict[str, np.ndarray]:
    grid = empty_grid(96, 96, 25e3)
    x, y = grid.x.values[None, :], grid.y.values[:, None]
    ellipse = (((x - 300e3) / 900e3) ** 2 + ((y + 200e3) / 400e3) ** 2) < 1.0
    small = np.hypot(x + 800e3, y - 800e3) < 250e3
    return {
        "filling disc": disc_height(grid, 1100e3, 1.0, supersample=2).values,
        "off-centre ellipse + disc": ellipse + 0.5 * small,
        "strip to two edges": ((x > 600e3) & (y < -200e3)).astype(float),
    }


def _run(load: np.ndarray, width: float) -> list[tuple[np.ndarray, np.ndarray]]:
    grid = empty_grid(96, 96, 25e3)
    plate = Plate.from_rigidity(1e24, infill_density=0.0)
    stepper = ResponseStepper(grid, plate, width_factor=width, interpolation="previous")
    now, out = 0.0, []
    for t in TIMES:
        stepper.advance(t - now, load)
        now = t
        out.append((stepper.deflection.values.copy(), stepper.uplift_rate().values.copy()))
    return out


def main() -> None:
    widths = [float(a) for a in sys.argv[1:]] or [0.25, 0.5, 1.0]
    for name, shape in _loads().items():
        load = shape * 910.0 * 9.81 * 2000.0  # 2 km of ice (Pa)
        reference = _run(load, REFERENCE)
        for width in widths:
            cells = []
            for t, (w_ref, r_ref), (w, r) in zip(TIMES, reference, _run(load, width)):
                big = np.abs(r_ref) >= 0.1 * np.abs(r_ref).max()
                cells.append(
                    f"{t:g} yr w {np.abs(w - w_ref).max() / np.abs(w_ref).max():.1e} "
                    f"r {np.abs(r - r_ref).max() / np.abs(r_ref).max():.1e} "
                    f"p {(np.abs(r - r_ref)[big] / np.abs(r_ref)[big]).max():.1e}"
                )
            print(f"{name:26s} width {width:4.2f}: " + " | ".join(cells))


if __name__ == "__main__":
    main()
