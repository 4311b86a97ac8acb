"""Coupling gridflex to an ice-sheet model one time step at a time.

A stand-in "ice model" (an invented ice cap that thickens, then thins) hands over its
ice thickness every 100 years; gridflex's IceStepper returns the new bed elevation, which
the ice model uses for its next step. IceStepper applies floatation and the ocean load on
the moving bed exactly as `gridflex.ice_response` does (the same code), so a coupled run
and a batch run of the same history give the same bed.

Run:  python examples/ice_coupling.py
"""

import numpy as np

import gridflex
from gridflex.synthetic import disc_height, empty_grid

grid = empty_grid(96, 96, 25e3)  # 2400 km square, invented
bed = grid + 200.0  # flat land 200 m above sea level: the bed with no ice
cap = disc_height(grid, 500e3, 1.0)  # where the ice cap lies (0..1)
plate = gridflex.Plate(te=100e3, infill_density=0.0)  # the ocean is part of the load

stepper = gridflex.IceStepper(bed, plate, model="half-space", mantle_viscosity=1e21)
dt = 100.0  # years
for step in range(1, 201):
    thickness = 2500.0 * cap * np.sin(np.pi * step / 200)  # the ice model's ice at the step's end
    new_bed = stepper.advance(dt, thickness, sea_level=0.0)  # what the ice model reads back
    if step % 50 == 0:
        rate = stepper.uplift_rate()
        print(
            f"t = {stepper.time:6.0f} yr: centre bed {float(new_bed[48, 48]):7.1f} m, "
            f"uplift rate {float(rate[48, 48]) * 1e3:6.2f} mm/yr"
        )

# a coupled run can stop and go on later, bit for bit:
#   stepper.save("restart.nc");  stepper = gridflex.IceStepper.restore("restart.nc")
