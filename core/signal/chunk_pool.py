"""Chunks of a recording (or other tasks) worked on by a bounded pool, results taken in order."""

from __future__ import annotations

import threading
from contextlib import contextmanager
from typing import TypeVar

from threadpoolctl import ThreadpoolController

T = TypeVar("T")


CHUNK_VALUES = 1 << 21
"""Most samples x channels in one chunk of a streaming pass (8 MiB as float32). A chunk's filtered
block is written forward and read back by the zero-phase filter, so it must stay in cache: on this
kind of machine (32 MiB shared L3, 2 workers) filtering 384 channels in 1 s chunks took 19.5 ms per
recorded second against 4.5 ms in chunks of 5,000 samples; 64 channels keep their 1 s chunks."""


def chunk_samples(chunk_s: float, rate_hz: float, n_channels: int, least: int = 1) -> int:
    """Samples per chunk of a streaming pass: ``chunk_s`` seconds, shortened on wide recordings to
    hold at most :data:`CHUNK_VALUES` samples x channels, and at least ``least`` samples."""
    return max(least, min(int(chunk_s * rate_hz), CHUNK_VALUES // max(1, n_channels)))


def chunk_bounds(n_samples: int, chunk: int) -> list[tuple[int, int]]:
    """Consecutive ``[start, stop)`` ranges of at most ``chunk`` samples covering the file."""
    return [(s, min(s + chunk, n_samples)) for s in range(0, n_samples, chunk)]


_POOLS_LOCK = threading.Lock()
_pool_users = 0
_pool_limiter = None
_controller: ThreadpoolController | None = None


@contextmanager
def single_threaded_pools():
    """BLAS and OpenMP pools limited to one thread while any caller is inside.

    ``threadpool_limits`` does not act on the calling thread alone: OpenBLAS (the pthreads
    build in the numpy and scipy wheels) has one pool for the whole process, so other threads'
    BLAS calls are single-threaded meanwhile; only the OpenMP runtime limits the calling thread.
    It restores the limits it found on exit, so two overlapping uses from different threads
    would restore in the wrong order (and leave the process at one thread); here the first
    caller in sets the limits and the last one out restores them. threadpoolctl also lets only
    one Python thread control OpenBLAS (the first that set a limit), so the first caller in takes
    that control over from any earlier caller (all of them are out): an earlier caller may be a
    thread Python did not start (a Qt worker) whose record threadpoolctl cannot test for life,
    above all in a process forked from this one.
    """
    global _pool_users, _pool_limiter, _controller
    with _POOLS_LOCK:
        if _pool_users == 0:
            _controller = _controller or ThreadpoolController()
            for lib in _controller.lib_controllers:
                clear = getattr(type(lib), "clear_controlling_thread", None)
                if clear is not None:
                    clear(force=True)
            _pool_limiter = _controller.limit(limits=1)
        _pool_users += 1
    try:
        yield
    finally:
        with _POOLS_LOCK:
            _pool_users -= 1
            if _pool_users == 0:
                _pool_limiter.restore_original_limits()
                _pool_limiter = None
