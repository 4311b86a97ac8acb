"""The output plan of a run: every output path listed and checked before any work."""

from __future__ import annotations

import contextlib
import logging
from collections.abc import Mapping
from pathlib import Path

import xarray as xr

from gridflex.io.atomic import OutputSet
from gridflex.io.provenance import history_line, provenance_attrs
from gridflex.scenario.schema import Scenario

__all__ = ["OutputPlan", "stamp_result", "with_vertical_displacement"]

log = logging.getLogger(__name__)


class OutputPlan:
    """The files a run will write: checked together before any work, written together.

    Each path must be writable (:func:`gridflex.io.atomic.check_output_path`: not an
    input of the scenario, not an existing file unless *overwrite*, not a folder) and
    no two outputs may share a path; the message names the ``[output]`` key. Nothing is
    written or created when a check fails. The files are written inside
    :meth:`writing` (a :class:`gridflex.io.atomic.OutputSet`): each into a temporary,
    all renamed into place only when every one was written, never over a file another
    run wrote meanwhile unless *overwrite*; on any failure nothing of the run is left.

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
        self.files = OutputSet(overwrite, self.inputs)

    @property
    def paths(self) -> dict[str, Path]:
        """The planned paths by output name."""
        return self.files.paths

    def add(self, outputs: Mapping[str, Path | None]) -> None:
        """Check the outputs (name -> path; ``None``: not written) and add them to the plan.

        A name that is an ``[output]`` key is named in messages as that key.

        Raises
        ------
        InputError
            A path that may not be written, or two outputs on one path; the
            message names the output key(s) and the path.
        """
        where = {name: self.scenario.where("output", name.split()[0]) for name in outputs}
        planned = self.files.add(outputs, where)
        log.debug("output plan: %s", ", ".join(map(str, planned.values())))

    def writing(self) -> contextlib.AbstractContextManager[OutputSet]:
        """The block in which the planned files are written (see the class)."""
        return self.files.writing()

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
