"""Element-wise work on large grids in cache-sized blocks of rows, shared among threads.

numpy releases the GIL inside its loops, so a few threads that each walk a contiguous run
of row blocks keep all cores busy and every block's temporaries in cache. The solvers of
this package use it for the operator product and for the fused vector updates of the
conjugate gradients; the reductions (dot products) are summed block by block in a fixed
order, so results do not depend on the number of threads.

Dot products use :func:`numpy.einsum` rather than the BLAS ``dot``: on a 2-core machine a
threaded BLAS call leaves its worker threads spinning for a while after it returns, and the
FFTs that follow ran up to twice as slow (measured in the variable-rigidity solve).
"""

from __future__ import annotations

import functools
import itertools
import os
import threading
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from typing import TypeVar, cast

import numpy as np

__all__ = [
    "BLOCK_ELEMENTS",
    "MAX_THREADS",
    "block_rows",
    "dot",
    "for_row_blocks",
    "thread_count",
]

BLOCK_ELEMENTS = 55_000
"""Nodes per block, so that a block's few work arrays stay in cache (measured for the
operator product on 1728² nodes: blocks of 8, 16, 32, 64 rows took 0.036, 0.027, 0.023,
0.027 s per product, against 0.088 s unblocked)."""

MAX_THREADS = 8
"""Most threads used."""

T = TypeVar("T")


@functools.cache
def thread_count() -> int:
    """Threads used: all cores, at most :data:`MAX_THREADS` (read once: it also sizes the
    shared pool and the per-thread buffers)."""
    return max(1, min(os.cpu_count() or 1, MAX_THREADS))


@functools.cache
def _thread_pool() -> ThreadPoolExecutor | None:
    """One pool shared by all callers (None on one core): the calling thread works too, so
    the pool holds one thread fewer than :func:`thread_count`."""
    threads = thread_count()
    return ThreadPoolExecutor(threads - 1, "gridflex-rows") if threads > 1 else None


def block_rows(nx: int, ny: int) -> int:
    """Rows per block for a grid *nx* nodes wide and *ny* rows high."""
    return int(min(max(BLOCK_ELEMENTS // max(nx, 1), 4), ny))


def for_row_blocks(ny: int, rows: int, work: Callable[[int, int, int], T]) -> list[T]:
    """Call ``work(j0, j1, thread)`` for every block of *rows* rows of a grid *ny* high.

    The calling thread and the pool's threads each take the next block not yet taken until
    none is left, so a thread slowed down by other work on a shared machine takes fewer
    blocks instead of holding the others up at the end (contiguous runs, one per thread,
    waited for the slowest: on a 2-core machine loaded by another job the variable-rigidity
    solve spent most of its time waiting). ``thread`` (0 to :func:`thread_count` - 1; 0 is
    the caller) tells the call which thread-private buffers it may use. Runs on the calling
    thread alone when there is one core or too few blocks.

    Parameters
    ----------
    ny : int
        Number of rows.
    rows : int
        Rows per block (see :func:`block_rows`).
    work : callable
        ``work(j0, j1, thread)`` handles rows ``j0:j1``; blocks must not depend on each
        other (they run in any order).

    Returns
    -------
    list
        The return values, in the order of the blocks (so that sums taken from them do not
        depend on the thread count or on which thread took which block).
    """
    starts = range(0, ny, rows)
    pool = _thread_pool()
    threads = thread_count()
    if pool is None or len(starts) < 2 * threads:
        return [work(j0, min(j0 + rows, ny), 0) for j0 in starts]
    results: list[T | None] = [None] * len(starts)
    taken = itertools.count()
    lock = threading.Lock()

    def run(thread: int) -> None:
        while True:
            with lock:
                index = next(taken)
            if index >= len(starts):
                return
            j0 = starts[index]
            results[index] = work(j0, min(j0 + rows, ny), thread)

    futures = [pool.submit(run, thread) for thread in range(1, threads)]
    try:
        run(0)
    finally:
        # a helper that never started (the pool busy, say with a caller's own blocks) is
        # not waited for: the blocks are all taken; one that did start is
        for future in futures:
            if not future.cancel():
                future.result()
    return cast(list[T], results)


def dot(a: np.ndarray, b: np.ndarray) -> float:
    """Sum of a * b over all elements, by :func:`numpy.einsum` (no BLAS threads)."""
    return float(np.einsum("i,i->", a.reshape(-1), b.reshape(-1)))
