"""BLAS thread limits (gridflex.solvers.blas_threads)."""

from __future__ import annotations

import threading

from threadpoolctl import threadpool_info

from gridflex.solvers.blas_threads import single_threaded_blas


def _blas_threads() -> list[int]:
    return [info["num_threads"] for info in threadpool_info() if info["user_api"] == "blas"]


def test_single_threaded_blas_in_the_main_thread_only_and_restored():
    # common practice: the limit holds inside (nested too) and is undone after; other
    # threads leave BLAS alone
    before = _blas_threads()
    with single_threaded_blas():
        assert all(n == 1 for n in _blas_threads())
        with single_threaded_blas():
            assert all(n == 1 for n in _blas_threads())
        assert all(n == 1 for n in _blas_threads())
    assert _blas_threads() == before
    seen = {}

    def elsewhere() -> None:
        with single_threaded_blas():
            seen["inside"] = _blas_threads()

    worker = threading.Thread(target=elsewhere)
    worker.start()
    worker.join(5)
    assert seen["inside"] == before and _blas_threads() == before


def test_the_limit_holds_again_on_every_later_entry():
    # common practice: the cached controller limits and restores on each solve, not once
    before = _blas_threads()
    for _ in range(3):
        with single_threaded_blas():
            assert all(n == 1 for n in _blas_threads())
        assert _blas_threads() == before
