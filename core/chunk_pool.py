"""Chunks of a recording worked on by a bounded thread pool, results taken in file order."""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Iterable
from concurrent.futures import Future, ThreadPoolExecutor
from typing import TypeVar

from .progress import CancelFn, check

T = TypeVar("T")


def chunk_bounds(n_samples: int, chunk: int) -> list[tuple[int, int]]:
    """Consecutive ``[start, stop)`` ranges of at most ``chunk`` samples covering the file."""
    return [(s, min(s + chunk, n_samples)) for s in range(0, n_samples, chunk)]


def map_chunks(work: Callable[[int, int], T], bounds: Iterable[tuple[int, int]], workers: int,
               collect: Callable[[T], None], cancel: CancelFn = None) -> None:
    """Run ``work(start, stop)`` on every chunk in ``workers`` threads, ``collect`` each result in order.

    At most ``2 * workers`` chunks are in flight, so memory stays bounded whatever the file
    length. ``collect`` runs in the calling thread; an error or a cancel stops the chunks not
    yet started and is raised here.
    """
    with ThreadPoolExecutor(max_workers=workers) as pool:
        pending: deque[Future] = deque()
        try:
            for b in bounds:
                check(cancel)
                pending.append(pool.submit(work, *b))
                if len(pending) >= 2 * workers:
                    collect(pending.popleft().result())
            while pending:
                check(cancel)
                collect(pending.popleft().result())
        except BaseException:
            for f in pending:
                f.cancel()
            raise
