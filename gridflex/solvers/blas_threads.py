"""Single-threaded BLAS for the duration of an iterative solve.

The sparse LU solves of the band (SuperLU) call BLAS. A threaded OpenBLAS leaves its worker
threads spinning for a while after each call, and on a 2-core machine they took a core from
the FFTs and the operator product that follow: the preconditioner of the benchmark's step
(tests/benchmarks/variable.py, 1024²) took 110 ms per application with the default two BLAS
threads and 71 ms with one. The solvers' own parallel work does not go through BLAS
(:mod:`gridflex.solvers.row_blocks`, pocketfft's threads), so one BLAS thread costs nothing.

The limit is process-wide, and OpenBLAS (the BLAS that numpy and scipy ship) ignored a
thread count raised again from a thread other than the one that lowered it (seen with
0.3.30 and 0.3.31). So only the main thread sets and restores it, always itself: solves
running on other threads (a threaded parameter sweep) leave BLAS as it is, and run at most
a little slower.
"""

from __future__ import annotations

import contextlib
import sys
import threading
from collections.abc import Iterator
from typing import Any

from threadpoolctl import ThreadpoolController

__all__ = ["single_threaded_blas"]

_depth = 0
_limiter: Any = None
_controller: Any = None
_modules_seen = -1


def _blas_controller() -> Any:
    """The controller of the BLAS libraries loaded by now. Finding them scans every loaded
    shared library (about 10 ms), so it is cached until more modules have been imported
    (a BLAS arrives with an extension module)."""
    global _controller, _modules_seen
    if _controller is None or len(sys.modules) != _modules_seen:
        _controller = ThreadpoolController()
        _modules_seen = len(sys.modules)
    return _controller


@contextlib.contextmanager
def single_threaded_blas() -> Iterator[None]:
    """Limit BLAS libraries to one thread while the context is open, when entered from the
    main thread (re-entrant; the previous limits are restored on leaving the outermost
    context). Elsewhere a no-op.

    Examples
    --------
    >>> with single_threaded_blas():
    ...     pass
    """
    global _depth, _limiter
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    if _depth == 0:
        _limiter = _blas_controller().limit(limits=1, user_api="blas")
    _depth += 1
    try:
        yield
    finally:
        _depth -= 1
        if _depth == 0 and _limiter is not None:
            _limiter.restore_original_limits()
            _limiter = None
