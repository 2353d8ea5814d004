"""One small emitter, :class:`Signal`, used by the sorting model and by the window's workbench.

Bound methods are held weakly, so a closed view never keeps itself alive through the model it
watches; every other callable (a function, an inline lambda, a ``functools.partial``) is held
strongly, so a lambda passed inline keeps firing until it is disconnected.
"""

from __future__ import annotations

import weakref
from typing import Any, Callable


class Signal:
    """A tiny emitter of plain Python calls.

    ``connect`` holds a bound method through :class:`weakref.WeakMethod` (it stops firing once its
    object is gone) and any other callable strongly (it fires until ``disconnect``). Connecting the
    same callback twice is a no-op. ``emit`` calls every live callback in connection order; if any
    raise, the first error is raised after all have run, so that one failing view never leaves the
    others showing the previous state.
    """

    def __init__(self) -> None:
        self._slots: list[Callable[[], Callable | None]] = []

    def connect(self, callback: Callable) -> None:
        """Call ``callback`` on every emit (weakly held if it is a bound method)."""
        if not callable(callback):
            raise TypeError(f"callback must be callable, got {callback!r}")
        if any(ref() == callback for ref in self._slots):
            return
        if hasattr(callback, "__self__") and hasattr(callback, "__func__"):
            self._slots.append(weakref.WeakMethod(callback))
        else:
            self._slots.append(lambda f=callback: f)

    def disconnect(self, callback: Callable) -> None:
        """Stop calling ``callback`` (and forget callbacks whose object is gone)."""
        self._slots = [ref for ref in self._slots if ref() is not None and ref() != callback]

    def emit(self, *args: Any) -> None:
        """Call every live callback with ``args``; re-raise the first error once all have run."""
        first: Exception | None = None
        for ref in list(self._slots):
            fn = ref()
            if fn is not None:
                try:
                    fn(*args)
                except Exception as exc:  # re-raised below, once every callback has run
                    first = first or exc
        self._slots = [ref for ref in self._slots if ref() is not None]
        if first is not None:
            raise first
