"""Estimate memory before big allocations and refuse what cannot fit."""

from __future__ import annotations

import os

from gridflex.errors import InputError

__all__ = ["available_memory", "check_memory"]


def available_memory() -> int:
    """Memory (bytes) the OS reports as available now; total RAM if unknown."""
    try:
        with open("/proc/meminfo", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return int(os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return 1 << 62


def check_memory(nbytes: float, what: str, fraction: float = 0.9) -> None:
    """Raise :class:`InputError` if *nbytes* exceeds *fraction* of available memory.

    Parameters
    ----------
    nbytes : float
        Estimated peak memory of the step (bytes).
    what : str
        Description of the step, used in the message.
    fraction : float, default 0.9
        Share of the available memory that may be used.
    """
    free = available_memory()
    if nbytes > fraction * free:
        raise InputError(
            f"{what} needs about {nbytes / 2**30:.1f} GiB but only {free / 2**30:.1f} GiB "
            "is available; use a coarser grid, a smaller window or less padding"
        )
