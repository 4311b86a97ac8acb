"""Safe output files: written to temporaries beside their targets, then renamed.

A failed or interrupted write never leaves a half-written output under its final name,
an existing output is replaced only when asked, and an input is never written over.

One file (:func:`atomic_path`) or a set of files written together
(:class:`OutputSet`): a set is checked before any work, each file is written into a
staging temporary, and all of them are renamed into place only once every one was
written. Without *overwrite* the rename is exclusive (a hard link that fails when the
name exists), so two runs writing the same outputs at once cannot replace each other's
files; with it the commit of a set holds a lock on its folders, so the final files all
come from one run. A run that fails removes its temporaries and the folders it made.

Temporaries are named ``.<name>.gridflex-<pid>-<random>.part`` (replaced files kept for
a roll-back: ``.old``): a later run writing the same outputs removes those whose
process is gone (after a ``kill -9`` or a power loss), and says so.

The renames of a set of several files are journalled: before the first rename a
``.<name>.gridflex-<pid>-<random>.commit`` file listing every (temporary, output) pair is
written and flushed in each output folder. A run killed between two renames leaves it
behind; the next run writing into one of these folders finishes that commit first (every
listed temporary still there is renamed into place), so the outputs of the interrupted
run are all new, never a mix of two runs.
"""

from __future__ import annotations

import contextlib
import contextvars
import errno
import json
import logging
import os
import re
import secrets
import tempfile
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path

from gridflex.errors import GridflexError, InputError, OutputError

try:  # POSIX: commits of a set lock its folders
    import fcntl
except ImportError:  # pragma: no cover - not on POSIX
    fcntl = None  # type: ignore[assignment]

__all__ = [
    "OutputSet",
    "atomic_path",
    "check_output_path",
    "remove_stale_temporaries",
    "temporary_path",
]

log = logging.getLogger(__name__)

_TAG = "gridflex"
_TEMPORARY = re.compile(
    r"^\.(?P<name>.+)\.gridflex-(?P<pid>\d+)-[0-9A-Za-z_]+\.(?P<kind>part|old|commit)$"
)
"""Names of the temporaries of :func:`temporary_path`, the roll-back copies and the
commit journals."""

_ACTIVE: contextvars.ContextVar[OutputSet | None] = contextvars.ContextVar(
    "gridflex_output_set", default=None
)
"""The output set being written (:meth:`OutputSet.writing`), if any."""

_WRITE_ERRORS = (OSError, RuntimeError)
"""What a writer raises when the disk is full or the file system refuses (netCDF-C and
HDF5 report through RuntimeError)."""


def _umask() -> int:
    current = os.umask(0)
    os.umask(current)
    return current


def _names_folder(path: str | Path) -> bool:
    """*path* as written ends with a separator: it names a folder, not a file."""
    text = os.fspath(path)
    return text.endswith(os.sep) or bool(os.altsep and text.endswith(os.altsep))


def check_output_path(
    path: str | Path,
    overwrite: bool = False,
    inputs: Iterable[str | Path] = (),
    create_folder: bool = True,
    where: str | None = None,
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
    where : str, optional
        What names the path in messages (e.g. ``"scenario.toml: [output] file"``);
        default the path itself.

    Raises
    ------
    InputError
        If *path* names a folder (ends with a separator or is one), is one of
        *inputs*, exists and *overwrite* is false, or its folder is a file or cannot
        be created.
    """
    label = f"{path}" if where is None else f"{where}: {str(path)!r}"
    if _names_folder(path):
        raise InputError(f"{label} names a folder; give the output a file name")
    path = Path(path)
    resolved = path.resolve()
    for item in inputs:
        if Path(item).resolve() == resolved:
            raise InputError(f"{label}: output would overwrite an input file; choose another name")
    if path.is_dir():
        raise InputError(f"{label}: output path is a directory; give the output a file name")
    if path.exists() and not overwrite:
        raise InputError(f"{label}: output exists; pass --overwrite (overwrite=True) to replace it")
    for parent in resolved.parents:
        if parent.exists():
            if not parent.is_dir():
                raise InputError(f"{label}: {parent} is a file, not a folder")
            break
    if not create_folder:
        return path
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{label}: cannot create the output folder ({exc})") from exc
    return path


def temporary_path(final: Path, kind: str = "part") -> Path:
    """A new empty file beside *final*: ``.<name>.gridflex-<pid>-<random>.<kind>``."""
    fd, name = tempfile.mkstemp(
        prefix=f".{final.name}.{_TAG}-{os.getpid()}-", suffix=f".{kind}", dir=final.parent
    )
    os.close(fd)
    return Path(name)


def _process_alive(pid: int) -> bool:
    """Whether process *pid* exists (on other systems than POSIX: assumed so)."""
    if pid == os.getpid():
        return True
    if os.name != "posix":  # os.kill would end the process there
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # e.g. another user's process
        return True
    return True


def remove_stale_temporaries(folder: Path, names: Iterable[str] | None = None) -> list[Path]:
    """Remove the temporaries of interrupted gridflex runs in *folder*.

    Only temporaries named like those of :func:`temporary_path` whose process is gone,
    and, given *names*, only those of these output file names. Each removal is logged
    (INFO).

    Returns
    -------
    list of pathlib.Path
        The removed files.
    """
    wanted = None if names is None else set(names)
    removed: list[Path] = []
    _finish_interrupted_commits(folder)
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for entry in entries:
        match = _TEMPORARY.match(entry.name)
        if match is None or (wanted is not None and match["name"] not in wanted):
            continue
        pid = int(match["pid"])
        if match["kind"] == "commit" or _process_alive(pid):
            continue
        try:
            os.unlink(entry.path)
        except FileNotFoundError:
            continue
        except OSError as exc:
            log.info("cannot remove %s, left by an interrupted run: %s", entry.path, exc)
            continue
        log.info("removed %s, left by an interrupted gridflex run (process %d)", entry.path, pid)
        removed.append(Path(entry.path))
    return removed


def _write_journal(pairs: list[tuple[Path, Path]], overwrite: bool) -> list[Path]:
    """Write the commit journal of *pairs* (temporary, output) into every output folder
    and flush it; the journals' paths (empty when there is one file: nothing to mix)."""
    if len(pairs) < 2:
        return []
    journals: list[Path] = []
    try:
        for final in _one_per_folder(pairs):
            journals.append(temporary_path(final, "commit"))
        record = {
            "overwrite": overwrite,
            "files": [[str(tmp), str(final)] for tmp, final in pairs],
            "journals": [str(path) for path in journals],
        }
        for path in journals:
            path.write_text(json.dumps(record))
            _finish_temporary(path)
    except BaseException:
        _remove_all(journals)
        raise
    return journals


def _one_per_folder(pairs: list[tuple[Path, Path]]) -> list[Path]:
    """The first output of *pairs* in each folder."""
    firsts: dict[Path, Path] = {}
    for _, final in pairs:
        firsts.setdefault(final.parent, final)
    return list(firsts.values())


def _finish_interrupted_commits(folder: Path) -> None:
    """Finish the commits that a killed run left journalled in *folder*: every listed
    temporary still there is renamed into place (without overwrite only where the output
    name is still free), then the journals are removed. Each is logged (WARNING)."""
    try:
        entries = [e for e in os.scandir(folder) if e.name.endswith(".commit")]
    except OSError:
        return
    for entry in entries:
        match = _TEMPORARY.match(entry.name)
        if match is None or _process_alive(int(match["pid"])):
            continue
        try:
            record = json.loads(Path(entry.path).read_text())
            pairs = [(Path(tmp), Path(final)) for tmp, final in record["files"]]
            overwrite = bool(record["overwrite"])
            journals = [Path(p) for p in record["journals"]]
        except FileNotFoundError:  # finished by another run meanwhile
            continue
        except (OSError, ValueError, KeyError, TypeError):  # killed while writing it:
            _unlink(Path(entry.path))  # no rename had started, the temporaries are stale
            continue
        for tmp, final in pairs:
            try:
                if not tmp.exists():  # renamed before the kill
                    pass
                elif overwrite:
                    os.replace(tmp, final)
                else:
                    _link_new(tmp, final)
            except OSError as exc:
                log.warning("cannot finish the interrupted output %s: %s", final, exc)
            for backup in final.parent.glob(f".{final.name}.{_TAG}-{match['pid']}-*.old"):
                _unlink(backup)  # the roll-back copy of a file now replaced for good
        for path in journals:
            _unlink(path)
        log.warning(
            "finished writing %s, interrupted in an earlier run (process %s)",
            ", ".join(str(final) for _, final in pairs),
            match["pid"],
        )


def _finish_temporary(tmp: Path) -> None:
    """Give *tmp* the usual mode of a new file and flush it to the disk."""
    os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600
    fd = os.open(tmp, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _link_new(tmp: Path, final: Path) -> None:
    """Move *tmp* to *final*, failing with FileExistsError if *final* exists."""
    try:
        os.link(tmp, final)
    except FileExistsError:
        raise
    except OSError as exc:
        if exc.errno not in (errno.EPERM, errno.EOPNOTSUPP, errno.ENOTSUP, errno.EXDEV):
            raise
        # no hard links on this file system: reserve the name, then rename over it
        fd = os.open(final, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o666)
        os.close(fd)
        os.replace(tmp, final)
        return
    os.unlink(tmp)


def _keep_copy(final: Path) -> Path | None:
    """A hard link to the existing *final* for a roll-back (None: nothing there, or
    no hard links here)."""
    if not final.exists():
        return None
    for _ in range(8):
        backup = final.with_name(f".{final.name}.{_TAG}-{os.getpid()}-{secrets.token_hex(4)}.old")
        try:
            os.link(final, backup)
        except FileExistsError:
            continue
        except OSError:
            return None
        return backup
    return None


def _remove_all(paths: Iterable[Path]) -> None:
    for path in paths:
        _unlink(path)


def _unlink(path: Path | None) -> None:
    if path is None:
        return
    with contextlib.suppress(FileNotFoundError):
        path.unlink()


@contextlib.contextmanager
def _folder_locks(folders: Iterable[Path]) -> Iterator[None]:
    """Exclusive advisory locks on *folders*, taken in one order (no dead-lock)."""
    with contextlib.ExitStack() as stack:
        if fcntl is not None:
            for folder in sorted(set(folders), key=str):
                try:
                    fd = os.open(folder, os.O_RDONLY)
                except OSError:
                    continue
                stack.callback(os.close, fd)
                try:
                    fcntl.flock(fd, fcntl.LOCK_EX)
                except OSError as exc:  # e.g. a network file system without locks
                    log.debug("no lock on %s: %s", folder, exc)
                    continue
                stack.callback(fcntl.flock, fd, fcntl.LOCK_UN)
        yield


@dataclass
class _Committed:
    final: Path
    backup: Path | None
    inode: tuple[int, int]
    existed: bool


class OutputSet:
    """Output files written together: checked first, committed only when all are written.

    :meth:`add` checks the paths (:func:`check_output_path`, and no two outputs on one
    path) without creating anything, and removes temporaries that interrupted runs left
    for these outputs. Inside :meth:`writing`, :func:`atomic_path` (and so every writer
    of :mod:`gridflex.io`) writes a planned path into a staging temporary; when the block
    ends without an error every temporary is renamed into place, else they are removed,
    with the folders the set created.

    Parameters
    ----------
    overwrite : bool, default False
        Replace existing files.
    inputs : iterable of path
        Files never to be written over.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> files = OutputSet()
    >>> _ = files.add({"table": folder / "new" / "a.csv", "notes": folder / "new" / "b.txt"})
    >>> with files.writing():
    ...     with atomic_path(folder / "new" / "a.csv") as tmp:
    ...         _ = tmp.write_text("x,y")
    ...     with atomic_path(folder / "new" / "b.txt") as tmp:
    ...         _ = tmp.write_text("notes")
    >>> sorted(p.name for p in (folder / "new").iterdir())
    ['a.csv', 'b.txt']
    """

    def __init__(self, overwrite: bool = False, inputs: Iterable[str | Path] = ()) -> None:
        self.overwrite = overwrite
        self.inputs = [Path(p) for p in inputs]
        self.paths: dict[str, Path] = {}
        self.replaced: list[Path] = []
        self._names: dict[Path, str] = {}
        self._staged: dict[Path, Path] = {}
        self._created: list[Path] = []

    def add(
        self, paths: Mapping[str, str | Path | None], where: Mapping[str, str] | None = None
    ) -> dict[str, Path]:
        """Check *paths* (name -> path; ``None``: not written) and add them to the set.

        *where* gives, per name, what names the path in messages (default the name).
        Either every path is added or none.

        Returns
        -------
        dict
            The added paths by name.

        Raises
        ------
        InputError
            A path that may not be written or is also the path of another output; the
            message names the output(s) and the path.
        """
        where = where or {}
        planned = {name: path for name, path in paths.items() if path is not None}
        taken = dict(self._names)
        for name, path in planned.items():
            label = where.get(name, name)
            check_output_path(path, self.overwrite, self.inputs, create_folder=False, where=label)
            resolved = Path(path).resolve()
            other = taken.get(resolved)
            if other is not None:
                raise InputError(
                    f"{label}: {str(path)!r} is also the path of output {other!r}; "
                    "give each output its own file"
                )
            taken[resolved] = name
        added = {name: Path(path) for name, path in planned.items()}
        for name, path in added.items():
            self._names[path.resolve()] = name
            self.paths[name] = path
            remove_stale_temporaries(path.resolve().parent, [path.name])
        return added

    def planned(self, path: str | Path) -> bool:
        """Whether *path* is one of the set's outputs."""
        return Path(path).resolve() in self._names

    @contextlib.contextmanager
    def writing(self) -> Iterator[OutputSet]:
        """Write the set: stage every file written in the block, commit at its end.

        Raises
        ------
        OutputError
            A file could not be written or renamed into place (full disk, lost
            permission, another run wrote one of the names meanwhile); nothing of this
            run is left under a final name, and the folders it created are removed.
        """
        if _ACTIVE.get() is not None:
            raise RuntimeError("output sets cannot be nested")
        token = _ACTIVE.set(self)
        try:
            try:
                self._make_folders()
                yield self
            finally:
                _ACTIVE.reset(token)
            self._commit()
        except BaseException:
            self._discard()
            raise

    def stage(self, path: str | Path) -> Path:
        """A new staging temporary for the planned output *path*."""
        final = Path(path).resolve()
        if final not in self._names:
            raise RuntimeError(f"{path}: not in the output plan of this run")
        previous = self._staged.pop(final, None)
        _unlink(previous)
        self._make_folders()  # again, should a failing run beside this one have removed one
        tmp = temporary_path(final)
        self._staged[final] = tmp
        return tmp

    def drop(self, path: str | Path) -> None:
        """Forget and remove the staging temporary of *path* (its write failed)."""
        _unlink(self._staged.pop(Path(path).resolve(), None))

    def _make_folders(self) -> None:
        for final in self._names:
            missing = [p for p in (final.parent, *final.parent.parents) if not p.exists()]
            for folder in reversed(missing):
                try:
                    folder.mkdir()
                except FileExistsError:
                    continue
                except OSError as exc:
                    raise OutputError(
                        f"{folder}: cannot create the output folder ({exc.strerror or exc})"
                    ) from exc
                self._created.append(folder)

    def _commit(self) -> None:
        staged = sorted(self._staged.items(), key=lambda item: str(item[0]))
        for final, tmp in staged:
            try:
                _finish_temporary(tmp)
            except OSError as exc:
                raise OutputError(_failed(final, exc)) from exc
        done: list[_Committed] = []
        journals: list[Path] = []
        with _folder_locks(final.parent for final, _ in staged):
            try:
                journals = _write_journal([(tmp, final) for final, tmp in staged], self.overwrite)
                for final, tmp in staged:
                    stat = tmp.stat()
                    inode = (stat.st_dev, stat.st_ino)
                    existed = final.exists()
                    if self.overwrite:
                        backup = _keep_copy(final)
                        os.replace(tmp, final)
                    else:
                        backup = None
                        _link_new(tmp, final)
                    done.append(_Committed(final, backup, inode, existed))
            except FileExistsError as exc:
                self._roll_back(done)
                _remove_all(journals)
                raise OutputError(
                    f"{final}: output exists (another run wrote it meanwhile); nothing of "
                    "this run was kept; pass --overwrite (overwrite=True) to replace it"
                ) from exc
            except OSError as exc:
                self._roll_back(done)
                _remove_all(journals)
                raise OutputError(_failed(final, exc, self.replaced)) from exc
            _remove_all(journals)
        for item in done:
            _unlink(item.backup)
        self._staged.clear()
        self._sync_folders()

    def _roll_back(self, done: list[_Committed]) -> None:
        """Undo the renames of a failed commit: files put back or removed."""
        for item in reversed(done):
            try:
                stat = item.final.stat()
                ours = (stat.st_dev, stat.st_ino) == item.inode
            except OSError:
                ours = False
            try:
                if item.backup is not None:
                    os.replace(item.backup, item.final)
                elif ours and not item.existed:
                    item.final.unlink()
                elif ours:  # replaced an existing file that could not be kept
                    self.replaced.append(item.final)
            except OSError as exc:
                log.warning("cannot undo the output %s: %s", item.final, exc)
                self.replaced.append(item.final)

    def _discard(self) -> None:
        """Remove the staging temporaries and the (empty) folders the set created."""
        for tmp in self._staged.values():
            _unlink(tmp)
        self._staged.clear()
        for folder in reversed(self._created):
            with contextlib.suppress(OSError):
                folder.rmdir()
        self._created.clear()

    def _sync_folders(self) -> None:
        """Flush the renames (the folder entries) to the disk, where the system allows."""
        for folder in {final.parent for final in self._names}:
            with contextlib.suppress(OSError):
                fd = os.open(folder, os.O_RDONLY)
                try:
                    os.fsync(fd)
                finally:
                    os.close(fd)


def _failed(final: Path, exc: BaseException, replaced: Iterable[Path] = ()) -> str:
    """The message of a write or commit that failed on *final*."""
    reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
    lost = sorted(map(str, replaced))
    tail = (
        f"; these files were already replaced: {', '.join(lost)}"
        if lost
        else "; nothing of this run was kept"
    )
    return f"{final}: cannot write ({reason}){tail}"


@contextlib.contextmanager
def atomic_path(
    path: str | Path, overwrite: bool = False, inputs: Iterable[str | Path] = ()
) -> Iterator[Path]:
    """Context manager yielding a temporary path that becomes *path* on success.

    Inside :meth:`OutputSet.writing` a planned *path* is staged and renamed with the
    rest of the set (the set's own checks apply). Otherwise the file is renamed into
    place when the block ends: without *overwrite* only if *path* still does not exist
    then (an exclusive hard link), with it by :func:`os.replace`.

    Parameters
    ----------
    path : str or pathlib.Path
        Final output path.
    overwrite : bool, default False
        Replace an existing *path*.
    inputs : iterable of path
        Files that must never be written over.

    Raises
    ------
    InputError
        *path* may not be written (:func:`check_output_path`).
    OutputError
        The file could not be written or renamed (full disk, or *path* appeared
        meanwhile); nothing is left under *path* or beside it.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> target = pathlib.Path(tempfile.mkdtemp()) / "out.txt"
    >>> with atomic_path(target) as tmp:
    ...     _ = tmp.write_text("done")
    >>> target.read_text()
    'done'
    """
    active = _ACTIVE.get()
    if active is not None:
        if not active.planned(path):
            raise RuntimeError(f"{path}: not in the output plan of this run")
        tmp = active.stage(path)
        try:
            yield tmp
        except GridflexError:
            active.drop(path)
            raise
        except _WRITE_ERRORS as exc:
            active.drop(path)
            raise OutputError(_failed(Path(path), exc)) from exc
        except BaseException:
            active.drop(path)
            raise
        return
    final = check_output_path(path, overwrite, inputs)
    tmp = temporary_path(final)
    try:
        try:
            yield tmp
            _finish_temporary(tmp)
            if overwrite:
                os.replace(tmp, final)
            else:
                _link_new(tmp, final)
        except GridflexError:
            raise
        except FileExistsError as exc:
            raise OutputError(
                f"{final}: output exists (written meanwhile); pass --overwrite "
                "(overwrite=True) to replace it"
            ) from exc
        except _WRITE_ERRORS as exc:
            raise OutputError(_failed(final, exc)) from exc
    finally:
        _unlink(tmp)
