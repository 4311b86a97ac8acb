"""What a workflow produced: one result type for every command, printed one way."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import xarray as xr

__all__ = ["RunOutcome"]


@dataclass
class RunOutcome:
    """What a workflow (run, fit, sweep, basin, history, demo) produced.

    Attributes
    ----------
    result : xarray.Dataset
        The result as written (on the input grid): the solve, the best model of a fit,
        the sweep, the basin or the ice history.
    written : list of pathlib.Path
        Files written, in order.
    summary : dict
        Key numbers of the run (SI units), for programs.
    text : str
        The summary as lines of text for people (may be empty).
    """

    result: xr.Dataset
    written: list[Path] = field(default_factory=list)
    summary: dict[str, Any] = field(default_factory=dict)
    text: str = ""

    def report(self) -> str:
        """:attr:`text`, then one ``wrote PATH`` line per file written."""
        lines = [self.text] if self.text else []
        lines.extend(f"wrote {path}" for path in self.written)
        return "\n".join(lines)
