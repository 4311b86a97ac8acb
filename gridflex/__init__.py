"""gridflex: flexure of the lithosphere under arbitrary mapped loads.

Loads (Pa, positive down) on a regular grid in metres go in; an
:class:`xarray.Dataset` with the plate deflection (m, positive down) comes out.
"""

import logging

from ._version import __version__
from .anomalies import model_free_air_anomaly, model_gravity
from .errors import (
    ConvergenceError,
    EdgeLoadWarning,
    GravitySeriesWarning,
    GridflexError,
    GridflexWarning,
    InputError,
)
from .fitting import TeFit, fit_te
from .glacial import bed_stress, grounded_mask, ice_response
from .gravity import interface_gravity
from .history import ResponseStepper, viscous_response
from .infill import Infill, solve_with_infill
from .loads import (
    load_from_elevation,
    load_from_layers,
    pressure_from_height,
    pressure_from_layers,
    regional_surface,
)
from .plate import Plate, rigidity_from_te, te_from_rigidity
from .solve import solve
from .sweep import sweep

logging.getLogger(__name__).addHandler(logging.NullHandler())

__all__ = [
    "__version__",
    # model
    "Plate",
    "rigidity_from_te",
    "te_from_rigidity",
    # loads
    "pressure_from_height",
    "pressure_from_layers",
    "load_from_elevation",
    "load_from_layers",
    "regional_surface",
    # solving
    "solve",
    # through time
    "viscous_response",
    "ResponseStepper",
    "ice_response",
    "bed_stress",
    "grounded_mask",
    "Infill",
    "solve_with_infill",
    # gravity
    "interface_gravity",
    "model_gravity",
    "model_free_air_anomaly",
    # estimating te, sweeping parameters
    "fit_te",
    "TeFit",
    "sweep",
    # errors and warnings
    "GridflexError",
    "InputError",
    "ConvergenceError",
    "GridflexWarning",
    "EdgeLoadWarning",
    "GravitySeriesWarning",
]
