"""Blocked row loops (gridflex.solvers.row_blocks): block order and the blocked dot product."""

from __future__ import annotations

import numpy as np
import pytest

from gridflex.solvers import row_blocks


def test_row_blocks_return_in_block_order_and_dot_matches(monkeypatch):
    # common practice: block results come back in block order whatever the threads did
    monkeypatch.setattr(row_blocks, "BLOCK_ELEMENTS", 10)
    got = row_blocks.for_row_blocks(103, 3, lambda j0, j1, thread: (j0, j1))
    assert got == [(j, min(j + 3, 103)) for j in range(0, 103, 3)]
    rng = np.random.default_rng(0)
    a, b = rng.standard_normal((2, 50, 7))
    assert row_blocks.dot(a, b) == pytest.approx(float(np.sum(a * b)), rel=1e-13)


def test_row_blocks_share_blocks_among_threads_each_once():
    # common practice: every block runs exactly once; the caller works too (thread 0); a
    # thread held up takes fewer blocks instead of the others waiting for it
    if row_blocks.thread_count() < 2:
        pytest.skip("one core: the caller runs every block")
    import threading
    import time

    seen: list[tuple[int, int]] = []
    lock = threading.Lock()
    pool_started = threading.Event()

    def work(j0: int, j1: int, thread: int) -> int:
        with lock:
            seen.append((j0, thread))
        if thread:
            pool_started.set()
        elif j0 < 40:
            # the caller is slow at first (and waits until the pool has begun, so that a
            # busy machine cannot make this test fail): the pool takes the rest
            pool_started.wait(timeout=30.0)
            time.sleep(0.02)
        return j0

    got = row_blocks.for_row_blocks(200, 4, work)
    assert got == list(range(0, 200, 4))
    assert sorted(j0 for j0, _ in seen) == list(range(0, 200, 4))
    by_thread = {t: sum(1 for _, u in seen if u == t) for t in {u for _, u in seen}}
    assert set(by_thread) <= set(range(row_blocks.thread_count()))
    assert by_thread.get(0, 0) < 25  # dealt in halves, the caller would take 25


def test_row_blocks_pass_on_an_error_and_allow_a_nested_call():
    # common practice: an exception in a block reaches the caller; a loop inside a block
    # (the pool then busy) finishes on its own thread instead of waiting for the pool
    def failing(j0: int, j1: int, thread: int) -> None:
        if j0 == 40:
            raise ValueError("block 40")

    with pytest.raises(ValueError, match="block 40"):
        row_blocks.for_row_blocks(100, 4, failing)

    def nested(j0: int, j1: int, thread: int) -> int:
        return sum(row_blocks.for_row_blocks(16, 2, lambda a, b, t: b - a))

    assert row_blocks.for_row_blocks(32, 4, nested) == [16] * 8
