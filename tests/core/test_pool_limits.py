"""BLAS pool limits taken after a thread Python did not start held them, here and in a forked process.

threadpoolctl lets one Python thread control OpenBLAS's process-wide pool and asks that thread whether
it lives; a thread started outside Python (a Qt worker) is recorded as a dummy thread, which cannot be
asked once the process has forked (the forked clustering workers hit this after a window job).
"""

from __future__ import annotations

import _thread
import multiprocessing
import threading

import numpy as np
import pytest

from rigside.core.signal.chunk_pool import single_threaded_pools


def _limited_product() -> float:
    with single_threaded_pools():
        a = np.ones((64, 64))
        return float((a @ a)[0, 0])


def _in_foreign_thread() -> None:
    done = threading.Event()

    def work() -> None:
        try:
            _limited_product()
        finally:
            done.set()
    _thread.start_new_thread(work, ())       # a thread threading did not start: a dummy thread to it
    assert done.wait(30)


@pytest.mark.skipif("fork" not in multiprocessing.get_all_start_methods(), reason="needs fork")
def test_limits_work_in_a_process_forked_after_a_foreign_thread_held_them():
    _in_foreign_thread()
    assert _limited_product() == 64.0
    with multiprocessing.get_context("fork").Pool(1) as pool:
        assert pool.apply(_limited_product) == 64.0
