"""Atomic output files: write to a temporary file beside the target, then rename.

A failed or interrupted write never leaves a half-written output, an existing
output is replaced only when asked, and an input is never written over.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path

from gridflex.errors import InputError

__all__ = ["atomic_path", "check_output_path"]


def _umask() -> int:
    current = os.umask(0)
    os.umask(current)
    return current


def check_output_path(
    path: str | Path,
    overwrite: bool = False,
    inputs: Iterable[str | Path] = (),
    create_folder: bool = True,
) -> Path:
    """Check that *path* may be written and return it as a Path.

    Parameters
    ----------
    path : str or pathlib.Path
        The output file.
    overwrite : bool, default False
        An existing file may be replaced.
    inputs : iterable of path
        Files that must never be written over.
    create_folder : bool, default True
        Create the missing parent folders (``False``: only check, create nothing).

    Raises
    ------
    InputError
        If *path* is one of *inputs*, exists and *overwrite* is false, is a
        directory, or its folder cannot be created.
    """
    path = Path(path)
    resolved = path.resolve()
    for item in inputs:
        if Path(item).resolve() == resolved:
            raise InputError(f"{path}: output would overwrite an input file; choose another name")
    if path.is_dir():
        raise InputError(f"{path}: output path is a directory")
    if path.exists() and not overwrite:
        raise InputError(f"{path}: output exists; pass --overwrite (overwrite=True) to replace it")
    if not create_folder:
        return path
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{path}: cannot create the output folder ({exc})") from exc
    return path


@contextlib.contextmanager
def atomic_path(
    path: str | Path, overwrite: bool = False, inputs: Iterable[str | Path] = ()
) -> Iterator[Path]:
    """Context manager yielding a temporary path that replaces *path* on success.

    Parameters
    ----------
    path : str or pathlib.Path
        Final output path.
    overwrite : bool, default False
        Replace an existing *path*.
    inputs : iterable of path
        Files that must never be written over.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> target = pathlib.Path(tempfile.mkdtemp()) / "out.txt"
    >>> with atomic_path(target) as tmp:
    ...     _ = tmp.write_text("done")
    >>> target.read_text()
    'done'
    """
    final = check_output_path(path, overwrite, inputs)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{final.name}.", suffix=".part", dir=final.parent)
    os.close(fd)
    tmp = Path(tmp_name)
    try:
        yield tmp
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; outputs get the usual mode
        os.replace(tmp, final)
    finally:
        if tmp.exists():
            tmp.unlink()
