"""Estimate memory before big allocations and refuse what cannot fit.

The memory a step may use is the smallest of what the system has available
(``MemAvailable``), what the process's own limits leave (the soft ``RLIMIT_AS`` and
``RLIMIT_DATA`` minus the address space and data already used) and what its control
group leaves (cgroup v2 ``memory.max`` minus ``memory.current``, or cgroup v1
``memory.limit_in_bytes`` minus ``memory.usage_in_bytes``, over the group and its
parents).
"""

from __future__ import annotations

import math
import os
from pathlib import Path

from gridflex.errors import InputError

__all__ = ["available_memory", "cgroup_memory_room", "check_memory", "memory_bounds"]

_PROC = Path("/proc")
_CGROUP_ROOT = Path("/sys/fs/cgroup")
_UNLIMITED = 1 << 60
"""Limits at or above this many bytes mean "no limit" (cgroup v1 writes 2^63 - 4096)."""


def _read_int(path: Path) -> int | None:
    try:
        text = path.read_text(encoding="ascii").strip()
    except (OSError, UnicodeDecodeError):
        return None
    try:
        return int(text)
    except ValueError:
        return None  # "max": no limit


def _system_available(proc: Path = _PROC) -> int | None:
    """``MemAvailable`` of /proc/meminfo (bytes); None if unknown."""
    try:
        with open(proc / "meminfo", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return int(os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return None


def _status_bytes(field: str, proc: Path = _PROC) -> int | None:
    """A ``kB`` field of /proc/self/status (e.g. ``VmSize``) in bytes; None if unknown."""
    try:
        with open(proc / "self" / "status", encoding="ascii") as handle:
            for line in handle:
                if line.startswith(field + ":"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return None


def _rlimit_room() -> list[tuple[str, int]]:
    """Room left under the soft address-space and data-segment limits (bytes)."""
    try:
        import resource
    except ImportError:  # not on POSIX
        return []
    out = []
    for name, field in (("RLIMIT_AS", "VmSize"), ("RLIMIT_DATA", "VmData")):
        soft = resource.getrlimit(getattr(resource, name))[0]
        if soft == resource.RLIM_INFINITY or soft < 0 or soft >= _UNLIMITED:
            continue
        used = _status_bytes(field) or 0
        out.append((f"the process's limit {name} ({soft / 2**30:.3g} GiB)", max(soft - used, 0)))
    return out


def _group_dirs(base: Path, relative: str) -> list[Path]:
    """The cgroup folder of *relative* under *base* and each of its parents up to *base*;
    only *base* itself when the folder is not visible (another cgroup namespace)."""
    folder = base / relative.strip("/")
    if not folder.is_dir():
        return [base]
    dirs = [folder]
    while folder != base and base in folder.parents:
        folder = folder.parent
        dirs.append(folder)
    return dirs


def cgroup_memory_room(
    proc_cgroup: Path = _PROC / "self" / "cgroup", root: Path = _CGROUP_ROOT
) -> int | None:
    """Memory (bytes) the process's control groups still allow; None without a limit.

    Parameters
    ----------
    proc_cgroup : pathlib.Path, default /proc/self/cgroup
        The process's cgroup membership (lines ``id:controllers:path``).
    root : pathlib.Path, default /sys/fs/cgroup
        Where the cgroup file systems are mounted: cgroup v2 at *root* (or
        *root*/unified on a hybrid system), cgroup v1's memory controller at
        *root*/memory.

    Returns
    -------
    int or None
        The smallest limit minus usage over the group and its parents.
    """
    try:
        lines = proc_cgroup.read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError):
        return None
    rooms: list[int] = []
    for line in lines:
        parts = line.split(":", 2)
        if len(parts) != 3:
            continue
        _, controllers, relative = parts
        if controllers == "":  # cgroup v2
            files = ("memory.max", "memory.current")
            bases = [root, root / "unified"]
        elif "memory" in controllers.split(","):  # cgroup v1
            files = ("memory.limit_in_bytes", "memory.usage_in_bytes")
            bases = [root / "memory"]
        else:
            continue
        for base in bases:
            if not base.is_dir():
                continue
            for folder in _group_dirs(base, relative):
                limit = _read_int(folder / files[0])
                if limit is None or limit >= _UNLIMITED:
                    continue
                used = _read_int(folder / files[1]) or 0
                rooms.append(max(limit - used, 0))
    return min(rooms) if rooms else None


def memory_bounds() -> list[tuple[str, int]]:
    """Every known bound on the memory this process may still allocate.

    Returns
    -------
    list of (str, int)
        ``(what sets the bound, bytes)``: the system's available memory, the room
        under the process's soft resource limits and under its control group's limit.
    """
    bounds: list[tuple[str, int]] = []
    system = _system_available()
    if system is not None:
        bounds.append(("the system's available memory", system))
    bounds.extend(_rlimit_room())
    group = cgroup_memory_room()
    if group is not None:
        bounds.append(("the control group's memory limit", group))
    return bounds


def available_memory() -> int:
    """Memory (bytes) this process may still use: the smallest of :func:`memory_bounds`
    (2^62 when nothing is known)."""
    return min((room for _, room in memory_bounds()), default=1 << 62)


def _gib(nbytes: float) -> str:
    return f"{nbytes / 2**30:.3g} GiB"


def check_memory(
    nbytes: float, what: str, fraction: float = 0.9, advice: str | None = None
) -> None:
    """Raise :class:`InputError` if *nbytes* exceeds *fraction* of available memory.

    Parameters
    ----------
    nbytes : float
        Estimated peak memory of the step (bytes); an integer product of the grid
        sizes (Python ints do not overflow), or ``inf``.
    what : str
        Description of the step, used in the message.
    fraction : float, default 0.9
        Share of the available memory that may be used.
    advice : str, optional
        What the user should change (e.g. ``"use a coarser [working_grid] spacing"``);
        by default a generic hint.

    Raises
    ------
    InputError
        Naming the step, the estimate, the memory available, what limits it and what
        to change.
    """
    free = available_memory()
    try:
        need = float(nbytes)
    except OverflowError:  # an integer estimate beyond any float
        need = math.inf
    if math.isfinite(need) and need <= fraction * free:
        return
    shown = f"about {_gib(need)}" if math.isfinite(need) else "more memory than exists"
    bounds = memory_bounds()  # read again: the smallest names what limits the step
    source, room = min(bounds, key=lambda b: b[1], default=("", 0))
    limited = f" (set by {source})" if source and abs(room - free) <= 0.1 * free else ""
    hint = advice or "use a coarser grid, a smaller window or less padding"
    raise InputError(f"{what} needs {shown} but only {_gib(free)} is available{limited}; {hint}")
