"""Tables (CSV): 1-D results such as profiles out, series such as sea level in."""

from __future__ import annotations

import csv
import math
import re
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from gridflex.errors import InputError
from gridflex.io.atomic import atomic_path
from gridflex.units import si_unit, unit_factor

__all__ = ["read_csv_quantities", "write_csv"]


def write_csv(
    table: xr.Dataset, path: str | Path, overwrite: bool = False, inputs: Iterable[str | Path] = ()
) -> Path:
    """Write a 1-D Dataset as CSV: its dimension, its 1-D coordinates, then its variables.

    Column headers are ``name [units]``. Written atomically.

    Parameters
    ----------
    table : xarray.Dataset
        Variables and coordinates on one dimension.
    path : str or pathlib.Path
        CSV file.
    overwrite : bool, default False
        Replace an existing file.
    inputs : iterable of path
        Files never to be overwritten.
    """
    if len(table.dims) != 1:
        raise InputError(f"a CSV table needs one dimension, got {tuple(table.dims)!r}")
    dim = str(next(iter(table.dims)))
    names = [dim] + [str(c) for c in table.coords if c != dim and table[c].dims == (dim,)]
    names += [str(v) for v in table.data_vars]
    header = [
        f"{n} [{table[n].attrs['units']}]" if table[n].attrs.get("units") else n for n in names
    ]
    columns = np.column_stack([np.asarray(table[n].values, dtype=np.float64) for n in names])
    with atomic_path(path, overwrite, inputs) as tmp:
        with open(tmp, "w", newline="", encoding="utf-8") as handle:
            writer = csv.writer(handle)
            writer.writerow(header)
            writer.writerows([f"{v:.10g}" for v in row] for row in columns)
    return Path(path)


_HEADER = re.compile(r"^\s*([^\[\(]*?)\s*(?:[\[\(]\s*([^\]\)]*?)\s*[\]\)])?\s*$")


def read_csv_quantities(path: str | Path, columns: dict[str, str], where: str) -> dict[str, Any]:
    """Read named columns of a CSV file, each converted to SI by the unit in its header.

    The header names each column as ``name [unit]`` (the form :func:`write_csv` writes)
    or ``name (unit)``, e.g. ``age [Ma], level [m]``; the unit is required (a number
    without one could be years or millions of years). Other columns are ignored.

    Parameters
    ----------
    path : str or pathlib.Path
        CSV file (comma separated, one header row).
    columns : dict
        Column name -> dimension of :data:`gridflex.units.DIMENSIONS` (e.g.
        ``{"age": "time", "level": "length"}``).
    where : str
        The scenario key that named the file, for messages.

    Returns
    -------
    dict
        Column name -> numpy.ndarray (float64, SI: m, years, ...), in file order.

    Raises
    ------
    InputError
        Missing file, column or unit, a unit of the wrong kind, a value that is not a
        finite number, no data rows.
    """
    path = Path(path)
    where = f"{where} ({path})"
    try:
        with open(path, newline="", encoding="utf-8-sig") as handle:
            rows = [row for row in csv.reader(handle) if any(cell.strip() for cell in row)]
    except OSError as exc:
        raise InputError(f"{where}: cannot read the CSV file: {exc.strerror or exc}") from exc
    if len(rows) < 2:
        raise InputError(f"{where}: needs a header row and at least one row of values")
    found: dict[str, tuple[int, str]] = {}
    for index, cell in enumerate(rows[0]):
        match = _HEADER.match(cell)
        if match:
            found[match.group(1).strip()] = (index, (match.group(2) or "").strip())
    out: dict[str, Any] = {}
    for name, dimension in columns.items():
        if name not in found:
            raise InputError(
                f"{where}: no column {name!r} in the header {rows[0]!r}; name the columns "
                f"like '{name} [{si_unit(dimension)}]'"
            )
        index, unit = found[name]
        if not unit:
            raise InputError(
                f"{where}: column {name!r} has no unit; write it in the header, e.g. "
                f"'{name} [{si_unit(dimension)}]'"
            )
        factor = unit_factor(unit, dimension, f"{where} column {name!r}")
        values = []
        for number, row in enumerate(rows[1:], start=2):
            text = row[index].strip() if index < len(row) else ""
            try:
                value = float(text)
            except ValueError:
                value = math.nan
            if not math.isfinite(value):
                raise InputError(
                    f"{where}: row {number}, column {name!r}: expected a finite number, "
                    f"got {text!r}"
                )
            values.append(value * factor)
        out[name] = np.asarray(values, dtype=np.float64)
    return out
