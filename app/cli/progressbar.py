"""A plain-text progress bar for the command line (stderr, throttled)."""

from __future__ import annotations

import sys
import time


class TextProgress:
    """Callable ``(fraction, message)`` drawing a bar on stderr at most ten times a second; as a
    context manager it closes the bar (ends its line) on the way out, error or not."""

    def __init__(self, enabled: bool = True, stream=None):
        self.enabled = enabled
        self.stream = stream or sys.stderr
        self._last = 0.0
        self._message = ""
        self._step = -1

    def __call__(self, fraction: float, message: str = "") -> None:
        if not self.enabled:
            return
        tty = self.stream.isatty()
        now = time.monotonic()
        if tty and now - self._last < 0.1 and fraction < 1.0 and message == self._message:
            return
        step = int(fraction * 10)
        if not tty and step == self._step and message == self._message:
            return  # logs get one line per tenth, not a stream of carriage returns
        self._last, self._message, self._step = now, message, step
        width = 30
        filled = int(round(fraction * width))
        bar = f"[{'#' * filled}{'.' * (width - filled)}] {fraction * 100:5.1f}% {message}"
        self.stream.write(f"\r{bar:<60}" if tty else bar + "\n")
        self.stream.flush()

    def __enter__(self) -> "TextProgress":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        if self.enabled and self.stream.isatty():
            self.stream.write("\n")
            self.stream.flush()
