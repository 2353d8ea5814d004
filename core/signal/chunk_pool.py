"""Chunks of a recording (or other tasks) worked on by a bounded pool, results taken in order."""

from __future__ import annotations

import threading
from collections import deque
from collections.abc import Callable, Iterable
from concurrent.futures import Executor, Future, ThreadPoolExecutor
from contextlib import contextmanager
from typing import TypeVar

from threadpoolctl import threadpool_limits

from rigside.core.progress import CancelFn, check

T = TypeVar("T")


def chunk_bounds(n_samples: int, chunk: int) -> list[tuple[int, int]]:
    """Consecutive ``[start, stop)`` ranges of at most ``chunk`` samples covering the file."""
    return [(s, min(s + chunk, n_samples)) for s in range(0, n_samples, chunk)]


def map_chunks(work: Callable[..., T], tasks: Iterable[tuple], workers: int,
               collect: Callable[[T], None], cancel: CancelFn = None, pool: Executor | None = None) -> None:
    """Run ``work(*task)`` for every task in ``workers`` threads, ``collect`` each result in order.

    Tasks are usually chunk bounds ``(start, stop)``. At most ``2 * workers`` tasks are in
    flight (tasks are taken lazily from ``tasks``), so memory stays bounded whatever the file
    length. ``collect`` runs in the calling thread; an error or a cancel stops the tasks not
    yet started and is raised here. ``pool`` replaces the thread pool (e.g. with processes).
    """
    with pool or ThreadPoolExecutor(max_workers=workers) as runner:
        pending: deque[Future] = deque()
        try:
            for task in tasks:
                check(cancel)
                pending.append(runner.submit(work, *task))
                if len(pending) >= 2 * workers:
                    collect(pending.popleft().result())
            while pending:
                check(cancel)
                collect(pending.popleft().result())
        except BaseException:
            for f in pending:
                f.cancel()
            raise


_POOLS_LOCK = threading.Lock()
_pool_users = 0
_pool_limiter = None


@contextmanager
def single_threaded_pools():
    """BLAS and OpenMP pools limited to one thread while any caller is inside.

    ``threadpool_limits`` does not act on the calling thread alone: OpenBLAS (the pthreads
    build in the numpy and scipy wheels) has one pool for the whole process, so other threads'
    BLAS calls are single-threaded meanwhile; only the OpenMP runtime limits the calling thread.
    It restores the limits it found on exit, so two overlapping uses from different threads
    would restore in the wrong order (and leave the process at one thread); here the first
    caller in sets the limits and the last one out restores them. threadpoolctl also lets only
    one Python thread control OpenBLAS (the first that set a limit, while it lives): called from
    another thread, the OpenBLAS limit is left as it is.
    """
    global _pool_users, _pool_limiter
    with _POOLS_LOCK:
        if _pool_users == 0:
            _pool_limiter = threadpool_limits(limits=1)
        _pool_users += 1
    try:
        yield
    finally:
        with _POOLS_LOCK:
            _pool_users -= 1
            if _pool_users == 0:
                _pool_limiter.restore_original_limits()
                _pool_limiter = None
