"""The output plan of a run: every output path listed and checked before any work."""

from __future__ import annotations

import logging
from collections.abc import Mapping
from pathlib import Path

import xarray as xr

from gridflex.errors import InputError
from gridflex.io.atomic import check_output_path
from gridflex.io.provenance import history_line, provenance_attrs
from gridflex.scenario.schema import Scenario

__all__ = ["OutputPlan", "stamp_result", "with_vertical_displacement"]

log = logging.getLogger(__name__)


class OutputPlan:
    """The files a run will write, checked together before the run does any work.

    Each path must be writable (:func:`gridflex.io.atomic.check_output_path`: not an
    input of the scenario, not an existing file unless *overwrite*, not a folder), and
    no two outputs may share a path. Nothing is written or created when a check
    fails; once every path passes, the missing output folders are created.

    Parameters
    ----------
    scenario : Scenario
        Its :attr:`~Scenario.input_files` are never written over.
    overwrite : bool, default False
        Replace existing output files.
    """

    def __init__(self, scenario: Scenario, overwrite: bool = False) -> None:
        self.scenario = scenario
        self.overwrite = overwrite
        self.inputs: list[Path] = scenario.input_files
        self.paths: dict[str, Path] = {}

    def add(self, outputs: Mapping[str, Path | None]) -> None:
        """Check the outputs (name -> path; ``None``: not written) and add them to the plan.

        Raises
        ------
        InputError
            A path that may not be written, or two outputs on one path; the
            message names the output key(s) and the path.
        """
        planned = {name: Path(path) for name, path in outputs.items() if path is not None}
        taken = {path.resolve(): name for name, path in self.paths.items()}
        for name, path in planned.items():
            where = self.scenario.where("output", name)
            other = taken.get(path.resolve())
            if other is not None:
                raise InputError(
                    f"{where}: {str(path)!r} is also the path of output {other!r}; "
                    "give each output its own file"
                )
            taken[path.resolve()] = name
            check_output_path(path, self.overwrite, self.inputs, create_folder=False)
        for path in planned.values():
            check_output_path(path, self.overwrite, self.inputs)
        self.paths.update(planned)
        log.debug("output plan: %s", ", ".join(map(str, planned.values())))

    def __getitem__(self, name: str) -> Path:
        return self.paths[name]

    def get(self, name: str) -> Path | None:
        """The planned path of output *name*, or ``None`` when it is not written."""
        return self.paths.get(name)


def stamp_result(
    result: xr.Dataset, scenario: Scenario, command: str, projected_axes: bool = False
) -> xr.Dataset:
    """A copy of *result* with the provenance stamp of ``gridflex COMMAND SCENARIO``.

    The attributes of :func:`gridflex.io.provenance.provenance_attrs` fill in what the
    result does not already say; ``history`` (:func:`gridflex.io.provenance.history_line`)
    and ``scenario`` (the scenario text) are set. With *projected_axes*, ``x`` and ``y``
    are labelled as projected coordinates in metres.
    """
    out = result.copy()
    out.attrs = {
        **provenance_attrs(),
        **result.attrs,
        "history": history_line(command, scenario.path),
        "scenario": scenario.text,
    }
    if projected_axes:
        for name in ("x", "y"):
            out[name].attrs = {
                "units": "m",
                "axis": name.upper(),
                "long_name": f"{name} (projected)",
            }
    return out


def with_vertical_displacement(result: xr.Dataset, surface: str) -> xr.Dataset:
    """A copy of *result* with ``vertical_displacement`` = -``deflection`` (m, up).

    *surface* names what moves (``"plate"``, ``"bed"``) in the ``long_name``.
    """
    out = result.copy()
    out["vertical_displacement"] = -result["deflection"]
    out["vertical_displacement"].attrs = {
        "units": "m",
        "long_name": f"vertical displacement of the {surface} (positive upward)",
    }
    return out
