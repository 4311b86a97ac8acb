"""gridflex: flexure of the lithosphere under arbitrary mapped loads.

Loads (Pa, positive down) on a regular grid in metres go in; an
:class:`xarray.Dataset` with the plate deflection (m, positive down) comes out.
"""

import logging

from gridflex._version import __version__
from gridflex.engine import solve
from gridflex.errors import (
    ConvergenceError,
    EdgeLoadWarning,
    GravitySeriesWarning,
    GridflexError,
    GridflexWarning,
    InputError,
    OutputError,
)
from gridflex.estimation.admittance import cross_spectra, fit_te_spectral
from gridflex.estimation.misfit import TeFit, fit_te
from gridflex.estimation.misfit_te_maps import MarginFit, ScaleFit, fit_te_margin, fit_te_scale
from gridflex.estimation.spectral_maps import te_map
from gridflex.estimation.stretching_fit import fit_stretching
from gridflex.glacial.coupling import IceStepper
from gridflex.glacial.elastic import elastic_halfspace_response
from gridflex.glacial.ice import bed_stress, grounded_mask, ice_response
from gridflex.glacial.response import ResponseStepper, viscous_response
from gridflex.gravity.anomalies import model_free_air_anomaly, model_gravity
from gridflex.gravity.first_order import CrustLayers
from gridflex.gravity.interfaces import interface_gravity
from gridflex.infill import Infill, solve_with_infill
from gridflex.loads import (
    load_from_elevation,
    load_from_layers,
    pressure_from_height,
    pressure_from_layers,
    regional_surface,
)
from gridflex.plate import Plate, rigidity_from_te, te_from_rigidity
from gridflex.sweeps.monte_carlo import ensemble
from gridflex.sweeps.parameter_sweep import sweep

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
    "IceStepper",
    "ice_response",
    "elastic_halfspace_response",
    "bed_stress",
    "grounded_mask",
    "Infill",
    "solve_with_infill",
    # gravity
    "interface_gravity",
    "model_gravity",
    "model_free_air_anomaly",
    "CrustLayers",
    # estimating te, sweeping parameters
    "fit_te",
    "TeFit",
    "fit_te_margin",
    "MarginFit",
    "fit_te_scale",
    "ScaleFit",
    "cross_spectra",
    "fit_te_spectral",
    "te_map",
    # stretching factor of a rift
    "fit_stretching",
    "sweep",
    "ensemble",
    # errors and warnings
    "GridflexError",
    "InputError",
    "ConvergenceError",
    "OutputError",
    "GridflexWarning",
    "EdgeLoadWarning",
    "GravitySeriesWarning",
]
