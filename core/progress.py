"""Progress reporting and cancellation shared by every long core operation."""

from __future__ import annotations

from typing import Callable, Optional

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
