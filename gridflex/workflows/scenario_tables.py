"""Typed access to the array tables (``[[name]]``) of a scenario."""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from gridflex.errors import InputError
from gridflex.scenario.schema import Scenario

__all__ = ["array_table", "refuse_tables"]


def array_table(scenario: Scenario, name: str) -> list[dict[str, Any]]:
    """The rows of the array table ``[[name]]`` of *scenario* (an empty list when absent).

    :meth:`Scenario.table` is typed for a plain table; this gives the rows of an array
    table (``[[loads]]``, ``[[breaks]]``, ``[[stages]]``, ...) their real type.
    """
    rows: list[dict[str, Any]] = scenario.tables.get(name) or []
    return rows


def refuse_tables(scenario: Scenario, names: Iterable[str], reason: str) -> None:
    """Refuse the tables *names* if *scenario* has any: a command that cannot use them.

    Raises
    ------
    InputError
        Naming the first table present and *reason*.
    """
    for name in names:
        if scenario.tables.get(name) is not None:
            raise InputError(f"{scenario.where(name)}: {reason}; remove the [{name}] table")
