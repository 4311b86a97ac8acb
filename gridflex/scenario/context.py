"""One way to say where in a scenario an error comes from."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

from gridflex.errors import InputError

__all__ = ["error_context"]


@contextmanager
def error_context(where: str, hint: str = "") -> Iterator[None]:
    """Re-raise any :class:`InputError` inside the block with *where* in front.

    Parameters
    ----------
    where : str
        The place, usually ``scenario.where(table, key)``: ``"file: [table] key"``.
    hint : str, optional
        What to do about it, appended after ``"; "``.

    Examples
    --------
    >>> with error_context("demo.toml: [plate]"):
    ...     raise InputError("te must be >= 0 m")
    Traceback (most recent call last):
    ...
    gridflex.errors.InputError: demo.toml: [plate]: te must be >= 0 m
    """
    try:
        yield
    except InputError as exc:
        raise InputError(f"{where}: {exc}" + (f"; {hint}" if hint else "")) from exc
