"""The one progress-callback type that long computations accept."""

from __future__ import annotations

from collections.abc import Callable

__all__ = ["Progress"]

Progress = Callable[[int, int], object]
"""A callable ``progress(done, total)`` called as work advances (counts of steps,
iterations or tasks); its return value is ignored. The CLI passes one that writes to
stderr; library code never prints."""
