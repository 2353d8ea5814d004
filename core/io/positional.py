"""Positional reads that work on every desktop.

``os.preadv`` / ``os.pread`` read at an offset without moving a shared file position, so threads
can read one file at once (Linux, macOS and the other Unixes). Where the system lacks them (Windows),
the same calls fall back to a seek and read under a lock on the open file.
"""

from __future__ import annotations

import os
import threading
from pathlib import Path


class PositionalFile:
    """A file opened read-only for reads at offsets, safe to share between threads."""

    def __init__(self, path: str | Path) -> None:
        self._fh = open(path, "rb", buffering=0)
        self._lock = threading.Lock()

    def size(self) -> int:
        """The file's size now, in bytes."""
        return os.fstat(self._fh.fileno()).st_size

    def readinto(self, view: memoryview, offset: int) -> int:
        """Read up to ``len(view)`` bytes at ``offset`` into ``view``; returns the count (0 at the end)."""
        if hasattr(os, "preadv"):
            return os.preadv(self._fh.fileno(), [view], offset)
        if hasattr(os, "pread"):
            data = os.pread(self._fh.fileno(), len(view), offset)
            view[:len(data)] = data
            return len(data)
        with self._lock:
            self._fh.seek(offset)
            return self._fh.readinto(view) or 0

    def read(self, n: int, offset: int) -> bytes:
        """Up to ``n`` bytes at ``offset`` (fewer at the end of the file)."""
        buf = bytearray(n)
        got = self.readinto(memoryview(buf), offset)
        return bytes(buf[:got])

    def close(self) -> None:
        self._fh.close()

    @property
    def closed(self) -> bool:
        return self._fh.closed
