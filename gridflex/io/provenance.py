"""The one provenance stamp: what every result and written file records about its making."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

from gridflex._version import __version__

__all__ = ["SIGN_CONVENTION", "history_line", "provenance_attrs"]

SIGN_CONVENTION = (
    "deflection positive downward; load positive downward; in-plane force positive in tension"
)
"""The sign convention recorded in every result."""


def provenance_attrs(
    plate_parameters: Mapping[str, Any] | None = None,
    attrs: Mapping[str, Any] | None = None,
    title: str = "thin elastic plate flexure",
) -> dict[str, Any]:
    """Global attributes of a result.

    Parameters
    ----------
    plate_parameters : mapping, optional
        The plate's parameters (``Plate.describe()``), recorded with the prefix ``plate_``.
    attrs : mapping, optional
        Attributes of the computation (solver, padding, ...), recorded as given, last.
    title : str
        The CF ``title``.

    Returns
    -------
    dict
        CF ``Conventions``, ``title``, ``source``, ``gridflex_version``, ``sign_convention``,
        then the plate's parameters and *attrs*.
    """
    out: dict[str, Any] = {
        "Conventions": "CF-1.8",
        "title": title,
        "source": f"gridflex {__version__}",
        "gridflex_version": __version__,
        "sign_convention": SIGN_CONVENTION,
    }
    out.update({f"plate_{k}": v for k, v in (plate_parameters or {}).items()})
    out.update(attrs or {})
    return out


def history_line(command: str, scenario: Path) -> str:
    """The CF ``history`` attribute of a file written by ``gridflex COMMAND SCENARIO``."""
    return f"gridflex {__version__} {command} {scenario.name}"
