"""Chunks of a recording (or other tasks) worked on by a bounded pool, results taken in order."""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Iterable
from concurrent.futures import Executor, Future, ThreadPoolExecutor
from typing import TypeVar

from .progress import CancelFn, check

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
