"""Tables (CSV) of 1-D results such as profiles."""

from __future__ import annotations

import csv
from collections.abc import Iterable
from pathlib import Path

import numpy as np
import xarray as xr

from gridflex.errors import InputError
from gridflex.io.atomic import atomic_path

__all__ = ["write_csv"]


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
