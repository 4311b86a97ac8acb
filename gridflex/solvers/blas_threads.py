"""Single-threaded BLAS for the duration of an iterative solve.

The sparse LU solves of the band (SuperLU) call BLAS. A threaded OpenBLAS leaves its worker
threads spinning for a while after each call, and on a 2-core machine they took a core from
the FFTs and the operator product that follow: the preconditioner of the benchmark's step
(tests/benchmarks/variable.py, 1024²) took 110 ms per application with the default two BLAS
threads and 71 ms with one. The solvers' own parallel work does not go through BLAS
(:mod:`gridflex.solvers.row_blocks`, pocketfft's threads), so one BLAS thread costs nothing.

The limit is process-wide (BLAS has no per-thread setting). :func:`single_threaded_blas`
counts the solves that hold it, so that concurrent solves (a threaded parameter sweep) set it
once and the last one to finish restores the previous thread counts.
"""

from __future__ import annotations

import contextlib
import threading
from collections.abc import Iterator
from typing import Any

from threadpoolctl import ThreadpoolController

__all__ = ["single_threaded_blas"]

_lock = threading.Lock()
_holders = 0
_limiter: Any = None


@contextlib.contextmanager
def single_threaded_blas() -> Iterator[None]:
    """Limit BLAS libraries to one thread while the context is open (re-entrant and
    thread-safe; the previous limits are restored when the last holder leaves).

    Examples
    --------
    >>> with single_threaded_blas():
    ...     pass
    """
    global _holders, _limiter
    with _lock:
        if _holders == 0:
            # a new controller each time: it sees the BLAS libraries loaded by now
            _limiter = ThreadpoolController().limit(limits=1, user_api="blas")
        _holders += 1
    try:
        yield
    finally:
        with _lock:
            _holders -= 1
            if _holders == 0 and _limiter is not None:
                _limiter.restore_original_limits()
                _limiter = None
