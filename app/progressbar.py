"""A plain-text progress bar for the command line (stderr, throttled)."""

from __future__ import annotations

import sys
import time


class TextProgress:
    """Callable ``(fraction, message)`` drawing a bar on stderr at most ten times a second."""

    def __init__(self, enabled: bool = True, stream=None):
        self.enabled = enabled
        self.stream = stream or sys.stderr
        self._last = 0.0
        self._message = ""

    def __call__(self, fraction: float, message: str = "") -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self._last < 0.1 and fraction < 1.0 and message == self._message:
            return
        self._last, self._message = now, message
        width = 30
        filled = int(round(fraction * width))
        end = "\n" if fraction >= 1.0 and not self.stream.isatty() else ""
        self.stream.write(f"\r[{'#' * filled}{'.' * (width - filled)}] {fraction * 100:5.1f}% {message:<24}{end}")
        self.stream.flush()

    def close(self) -> None:
        if self.enabled and self.stream.isatty():
            self.stream.write("\n")
            self.stream.flush()
