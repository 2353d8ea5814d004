"""Progress reporting and cancellation shared by every long core operation."""

from __future__ import annotations

from collections import deque
from concurrent.futures import Executor, Future, ThreadPoolExecutor
from typing import Callable, Iterable, Optional, TypeVar

R = TypeVar("R")

ProgressFn = Optional[Callable[[float, str], None]]
"""Called with (fraction done in [0, 1], short message)."""

CancelFn = Optional[Callable[[], bool]]
"""Returns True when the caller wants the operation to stop."""


class Cancelled(Exception):
    """Raised inside a long operation when its cancel check returned True."""


def report(progress: ProgressFn, fraction: float, message: str = "") -> None:
    """Forward a progress fraction to ``progress`` if one was given."""
    if progress is not None:
        progress(min(max(float(fraction), 0.0), 1.0), message)


def check(cancel: CancelFn) -> None:
    """Raise :class:`Cancelled` if ``cancel`` says so."""
    if cancel is not None and cancel():
        raise Cancelled("operation cancelled")


def run_bounded(work: Callable[..., R], items: Iterable[tuple], workers: int,
                on_result: Callable[[R], None], cancel: CancelFn = None, pool: Executor | None = None) -> None:
    """Run ``work(*item)`` for every item in a pool of ``workers`` threads, in bounded memory.

    At most ``2 * workers`` items are in flight; ``on_result`` gets each result in item order,
    on the calling thread. ``cancel`` is checked before every submission and every collection;
    on :class:`Cancelled` or any error the items not yet started are dropped and the error raised.

    Parameters
    ----------
    work
        Called in a worker thread with the fields of one item.
    items
        Argument tuples, consumed lazily.
    workers
        Pool size (at least 1).
    on_result
        Called with each result, in order.
    cancel
        Cancel check.
    pool
        Replaces the thread pool (e.g. with processes); shut down at the end.
    """
    with pool or ThreadPoolExecutor(max_workers=workers) as pool:
        pending: deque[Future] = deque()
        try:
            for item in items:
                check(cancel)
                pending.append(pool.submit(work, *item))
                if len(pending) >= 2 * workers:
                    on_result(pending.popleft().result())
            while pending:
                check(cancel)
                on_result(pending.popleft().result())
        except BaseException:
            for f in pending:
                f.cancel()
            raise
