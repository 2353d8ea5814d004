"""A hash of a recording's whole content, computed while another pass streams the file.

The quick fingerprint (:meth:`rigside.core.io.recording.Recording.fingerprint`: size and three sampled
blocks) answers at once whether a file is plausibly the same; the content hash (SHA-256 of
every byte) settles it. Detection feeds a :class:`ContentHasher` as it goes, so the full hash
costs no extra pass; :func:`content_hash` computes it on its own (before reusing a checkpoint
or computing from a session's recording).
"""

from __future__ import annotations

import hashlib
from pathlib import Path

from rigside.core.errors import RecordingError
from rigside.core.io.positional import PositionalFile
from rigside.core.progress import CancelFn, ProgressFn, check, report

BLOCK = 4 << 20
PREFIX = "sha256:"


class ContentHasher:
    """Hash ``path`` from start to end in step with a pass over it (see :meth:`advance`)."""

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self._file = PositionalFile(self.path)
        self.size = self._file.size()
        self._hash = hashlib.sha256()
        self._done = 0

    def _check_size(self) -> None:
        now = self._file.size()
        if now != self.size:
            raise RecordingError(f"recording {str(self.path)!r} must keep its size while it is read, "
                                 f"got {self.size} bytes at the start and {now} bytes now (file changed)")

    def advance(self, fraction: float) -> None:
        """Hash the content up to ``fraction`` of the file (0..1)."""
        target = min(self.size, int(self.size * min(max(fraction, 0.0), 1.0)))
        self._check_size()
        while self._done < target:
            block = self._file.read(min(BLOCK, target - self._done), self._done)
            if not block:
                self._check_size()
                raise RecordingError(f"recording {str(self.path)!r} must keep its size while it is read, "
                                     f"got an early end at byte {self._done}")
            self._hash.update(block)
            self._done += len(block)

    def finish(self) -> str:
        """Hash the rest and return ``"sha256:<hex>"``; the file is closed."""
        try:
            self.advance(1.0)
            if self._file.read(1, self.size):
                raise RecordingError(f"recording {str(self.path)!r} must keep its size while it is read, "
                                     f"got more than {self.size} bytes (file grew)")
            return PREFIX + self._hash.hexdigest()
        finally:
            self.close()

    def __enter__(self) -> "ContentHasher":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """Release the file (idempotent)."""
        self._file.close()


def content_hash(path: str | Path, progress: ProgressFn = None, cancel: CancelFn = None) -> str:
    """SHA-256 of the whole file as ``"sha256:<hex>"`` (what :class:`ContentHasher` gives).

    Parameters
    ----------
    path
        File to hash (read-only).
    progress, cancel
        Progress callback and cancel check (one step per 4 MiB block).
    """
    try:
        hasher = ContentHasher(path)
    except OSError as exc:
        raise RecordingError(f"recording must be readable, got {str(path)!r}: {exc.strerror}") from None
    with hasher:
        steps = max(1, -(-hasher.size // BLOCK))
        for i in range(1, steps + 1):
            check(cancel)
            hasher.advance(i / steps)
            report(progress, i / steps, "checking the recording's content")
        return hasher.finish()
