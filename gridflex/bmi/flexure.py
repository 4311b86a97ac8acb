"""``FlexureBmi``: a Basic Model Interface 2.0 (CSDMS) component around an IceStepper.

An ice-sheet model (or a framework such as a BMI coupler) sets the ice thickness and sea
level, calls :meth:`FlexureBmi.update`, and reads the bed elevation, the deflection and the
uplift rate. Variables (CSDMS standard names where one exists):

================================================  ========  ======  ==========================
name                                              units     role    meaning
================================================  ========  ======  ==========================
``glacier_ice__thickness``                        m         input   ice thickness H (>= 0)
``sea_water_surface__elevation``                  m         input   sea level z_sl
``bedrock_surface__elevation``                    m         output  bed b = bed_ref − w
``lithosphere__downward_deflection``              m         output  deflection w (down)
``bedrock_surface__time_derivative_of_elevation`` m yr-1    output  uplift rate −dw/dt
================================================  ========  ======  ==========================

All are float64 on one ``uniform_rectilinear`` grid (id 0) of cell centres ("node"):
shape ``(rows, columns)``, spacing and origin ``(y, x)`` in metres, rows from south
(smallest y) to north. Time is in years (``"yr"``: gridflex's year, 365.25 days) from 0.

With ``[solver] interpolation = "linear"`` (default) the ice and sea level set before
:meth:`~FlexureBmi.update` are those at the end of the step; with ``"previous"`` they are
held during it. :meth:`~FlexureBmi.update_until` takes steps of ``[time] step`` (the last
one shorter) with the ice and sea level set now.

Config file: TOML, see :mod:`gridflex.bmi.config`. A relative path that does not exist
from the current folder is looked for by its file name in the current folder (bmi-tester
copies the files of its ``--root-dir`` into a temporary folder and passes the path as it
was given); anything else missing is refused.
"""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Any, cast

import numpy as np
import xarray as xr
from bmipy import Bmi

from gridflex.bmi.config import BmiConfig, load_bmi_config
from gridflex.errors import InputError
from gridflex.glacial.coupling import IceStepper
from gridflex.synthetic import disc_height, empty_grid
from gridflex.workflows.grid_input import read_grid_input
from gridflex.workflows.history import ice_model_options
from gridflex.workflows.run import plate_from_scenario

__all__ = ["FlexureBmi", "INPUT_VARIABLES", "OUTPUT_VARIABLES"]

log = logging.getLogger(__name__)

INPUT_VARIABLES = {"glacier_ice__thickness": "m", "sea_water_surface__elevation": "m"}
"""Input variables and their units."""

OUTPUT_VARIABLES = {
    "bedrock_surface__elevation": "m",
    "lithosphere__downward_deflection": "m",
    "bedrock_surface__time_derivative_of_elevation": "m yr-1",
}
"""Output variables and their units."""

_UNITS = {**INPUT_VARIABLES, **OUTPUT_VARIABLES}
_TIME_MATCH = 1e-9  # years: a target this close to the current time is reached


def _config_path(config_file: str | None) -> Path:
    if not config_file:
        raise InputError("FlexureBmi.initialize: give the path of a TOML configuration file")
    path = Path(config_file)
    if not path.exists() and not path.is_absolute() and (Path.cwd() / path.name).is_file():
        log.info("configuration %s found as %s in the current folder", path, path.name)
        return Path.cwd() / path.name
    return path


class FlexureBmi(Bmi):
    """The bed under a changing ice sheet, as a BMI 2.0 component (see the module)."""

    def __init__(self) -> None:
        self._stepper: IceStepper | None = None
        self._config: BmiConfig | None = None
        self._values: dict[str, np.ndarray] = {}
        self._shape: tuple[int, int] = (0, 0)
        self._spacing = np.zeros(2)
        self._origin = np.zeros(2)
        self._x = np.zeros(0)
        self._y = np.zeros(0)

    # -- control --------------------------------------------------------------------
    def initialize(self, config_file: str) -> None:
        """Read the configuration and set the bed at time 0."""
        config = load_bmi_config(_config_path(config_file))
        bed = _bed(config)
        plate = plate_from_scenario(config, bed)
        ice = config.table("ice")
        thickness = xr.full_like(bed, ice["thickness"])
        if ice["radius"] is not None:
            thickness = thickness + disc_height(
                bed, ice["radius"], ice["height"], ice["center_x"], ice["center_y"]
            )
        level = config.table("sea")["level"]
        self._stepper = IceStepper(
            bed, plate, ice_thickness=thickness, sea_level=level, **ice_model_options(config)
        )
        self._config = config
        ny, nx = bed.shape
        self._shape = (ny, nx)
        self._y = np.asarray(bed["y"].values, dtype=np.float64)
        self._x = np.asarray(bed["x"].values, dtype=np.float64)
        self._spacing = np.array([self._y[1] - self._y[0], self._x[1] - self._x[0]])
        self._origin = np.array([self._y[0], self._x[0]])
        self._values = {name: np.zeros(ny * nx) for name in _UNITS}
        self._values["glacier_ice__thickness"][:] = thickness.values.ravel()
        self._values["sea_water_surface__elevation"][:] = level
        self._refresh()

    def _running(self) -> IceStepper:
        if self._stepper is None:
            raise InputError("FlexureBmi: call initialize(config_file) first")
        return self._stepper

    def _refresh(self) -> None:
        """Copy the stepper's state into the output arrays (in place: pointers stay valid)."""
        stepper = self._running()
        values = self._values
        np.copyto(values["bedrock_surface__elevation"], stepper.bed_elevation.values.ravel())
        np.copyto(values["lithosphere__downward_deflection"], stepper.deflection.values.ravel())
        rate = stepper.uplift_rate().values.ravel()
        np.copyto(values["bedrock_surface__time_derivative_of_elevation"], rate)

    def _advance(self, dt: float) -> None:
        stepper = self._running()
        shape = self._shape
        stepper.advance(
            dt,
            self._values["glacier_ice__thickness"].reshape(shape).copy(),
            self._values["sea_water_surface__elevation"].reshape(shape).copy(),
        )
        self._refresh()

    def update(self) -> None:
        """Advance by one time step (``[time] step``)."""
        self._advance(self.get_time_step())

    def update_until(self, time: float) -> None:
        """Advance to *time* (years) in steps of ``[time] step``, the last one shorter."""
        now = self.get_current_time()
        if time < now - _TIME_MATCH:
            raise InputError(f"update_until: {time:g} years is before the current time {now:g}")
        while time - self.get_current_time() > _TIME_MATCH:
            self._advance(min(self.get_time_step(), time - self.get_current_time()))

    def finalize(self) -> None:
        """Release the model."""
        self._stepper = None
        self._values = {}

    # -- information ----------------------------------------------------------------
    def get_component_name(self) -> str:
        return "gridflex glacial isostatic adjustment (elastic plate over a viscous mantle)"

    def get_input_item_count(self) -> int:
        return len(INPUT_VARIABLES)

    def get_output_item_count(self) -> int:
        return len(OUTPUT_VARIABLES)

    def get_input_var_names(self) -> tuple[str]:
        return cast(tuple[str], tuple(INPUT_VARIABLES))

    def get_output_var_names(self) -> tuple[str]:
        return cast(tuple[str], tuple(OUTPUT_VARIABLES))

    def _check_name(self, name: str) -> str:
        if name not in _UNITS:
            raise InputError(f"unknown variable {name!r}; known: {', '.join(_UNITS)}")
        return name

    def get_var_grid(self, name: str) -> int:
        self._check_name(name)
        return 0

    def get_var_type(self, name: str) -> str:
        self._check_name(name)
        return "float64"

    def get_var_units(self, name: str) -> str:
        return _UNITS[self._check_name(name)]

    def get_var_itemsize(self, name: str) -> int:
        self._check_name(name)
        return 8

    def get_var_nbytes(self, name: str) -> int:
        return 8 * self.get_grid_size(self.get_var_grid(name))

    def get_var_location(self, name: str) -> str:
        self._check_name(name)
        return "node"

    # -- time -----------------------------------------------------------------------
    def get_current_time(self) -> float:
        return float(self._running().time)

    def get_start_time(self) -> float:
        return 0.0

    def get_end_time(self) -> float:
        return float(self._table("time")["end"])

    def get_time_units(self) -> str:
        return "yr"

    def get_time_step(self) -> float:
        return float(self._table("time")["step"])

    def _table(self, name: str) -> Any:
        if self._config is None:
            raise InputError("FlexureBmi: call initialize(config_file) first")
        return self._config.table(name)

    # -- values ---------------------------------------------------------------------
    def get_value(self, name: str, dest: np.ndarray) -> np.ndarray:
        dest[:] = self.get_value_ptr(name)
        return dest

    def get_value_ptr(self, name: str) -> np.ndarray:
        self._running()
        return self._values[self._check_name(name)]

    def get_value_at_indices(self, name: str, dest: np.ndarray, inds: np.ndarray) -> np.ndarray:
        dest[:] = self.get_value_ptr(name)[inds]
        return dest

    def _input(self, name: str) -> np.ndarray:
        if name not in INPUT_VARIABLES:
            raise InputError(f"{name!r} cannot be set; inputs are {', '.join(INPUT_VARIABLES)}")
        return self.get_value_ptr(name)

    def set_value(self, name: str, src: np.ndarray) -> None:
        self._input(name)[:] = np.asarray(src, dtype=np.float64).ravel()

    def set_value_at_indices(self, name: str, inds: np.ndarray, src: np.ndarray) -> None:
        self._input(name)[inds] = src

    # -- grid -----------------------------------------------------------------------
    def _grid(self, grid: int) -> int:
        if grid != 0:
            raise InputError(f"unknown grid {grid!r}; this component has grid 0")
        self._running()
        return grid

    def get_grid_rank(self, grid: int) -> int:
        self._grid(grid)
        return 2

    def get_grid_size(self, grid: int) -> int:
        self._grid(grid)
        return int(self._shape[0] * self._shape[1])

    def get_grid_type(self, grid: int) -> str:
        self._grid(grid)
        return "uniform_rectilinear"

    def get_grid_shape(self, grid: int, shape: np.ndarray) -> np.ndarray:
        self._grid(grid)
        shape[:] = self._shape
        return shape

    def get_grid_spacing(self, grid: int, spacing: np.ndarray) -> np.ndarray:
        self._grid(grid)
        spacing[:] = self._spacing
        return spacing

    def get_grid_origin(self, grid: int, origin: np.ndarray) -> np.ndarray:
        self._grid(grid)
        origin[:] = self._origin
        return origin

    def get_grid_x(self, grid: int, x: np.ndarray) -> np.ndarray:
        self._grid(grid)
        x[:] = self._x
        return x

    def get_grid_y(self, grid: int, y: np.ndarray) -> np.ndarray:
        self._grid(grid)
        y[:] = self._y
        return y

    def get_grid_z(self, grid: int, z: np.ndarray) -> np.ndarray:
        self._grid(grid)
        raise NotImplementedError("grid 0 is two-dimensional: it has no z coordinate")

    def get_grid_node_count(self, grid: int) -> int:
        return self.get_grid_size(grid)

    def get_grid_edge_count(self, grid: int) -> int:
        raise NotImplementedError("edges are for unstructured grids; grid 0 is uniform")

    def get_grid_face_count(self, grid: int) -> int:
        raise NotImplementedError("faces are for unstructured grids; grid 0 is uniform")

    def get_grid_edge_nodes(self, grid: int, edge_nodes: np.ndarray) -> np.ndarray:
        raise NotImplementedError("edges are for unstructured grids; grid 0 is uniform")

    def get_grid_face_edges(self, grid: int, face_edges: np.ndarray) -> np.ndarray:
        raise NotImplementedError("faces are for unstructured grids; grid 0 is uniform")

    def get_grid_face_nodes(self, grid: int, face_nodes: np.ndarray) -> np.ndarray:
        raise NotImplementedError("faces are for unstructured grids; grid 0 is uniform")

    def get_grid_nodes_per_face(self, grid: int, nodes_per_face: np.ndarray) -> np.ndarray:
        raise NotImplementedError("faces are for unstructured grids; grid 0 is uniform")


def _bed(config: BmiConfig) -> xr.DataArray:
    """The reference bed (m, up) on the component's grid, rows from south to north."""
    bed = config.table("bed")
    if bed["file"] is not None:
        grid = read_grid_input(
            bed["file"], bed["variable"], config.where("bed", "file"), metric=True, role="elevation"
        )
        return grid.astype(np.float64)
    table = config.table("grid")
    return empty_grid(table["rows"], table["columns"], table["spacing"]) + bed["elevation"]
