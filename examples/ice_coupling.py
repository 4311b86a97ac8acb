"""Coupling gridflex to an ice-sheet model one time step at a time.

A stand-in "ice model" (an invented ice cap that thickens, then thins) hands over its
ice thickness every 100 years; gridflex returns the bed deflection, and the ice model
would use the new bed elevation (bed - w) for its next step.

Run:  python examples/ice_coupling.py
"""

import numpy as np

import gridflex
from gridflex.synthetic import disc_height, empty_grid

grid = empty_grid(96, 96, 25e3)  # 2400 km square, invented
bed = grid + 200.0  # flat land 200 m above sea level
cap = disc_height(grid, 500e3, 1.0)  # where the ice cap lies (0..1)
plate = gridflex.Plate(te=100e3, infill_density=0.0)  # ice sits in air

stepper = gridflex.ResponseStepper(
    grid, plate, model="half-space", mantle_viscosity=1e21, interpolation="previous"
)
dt = 100.0  # years
for step in range(200):
    thickness = 2500.0 * cap * np.sin(np.pi * step / 200)  # the ice model's answer
    w = stepper.deflection
    load = gridflex.bed_stress(thickness, bed - w, 0.0) - gridflex.bed_stress(0.0, bed, 0.0)
    w = stepper.advance(dt, load)  # the load held over this step
    if step % 50 == 49:
        rate = stepper.uplift_rate()
        print(
            f"t = {stepper.time:6.0f} yr: centre deflection {float(w[48, 48]):6.1f} m, "
            f"uplift rate {float(rate[48, 48]) * 1e3:6.2f} mm/yr"
        )
