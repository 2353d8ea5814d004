"""Atomic file writes: a temporary file beside the target, flushed, fsynced, renamed.

A reader (or a process restarted after a crash) sees either the old complete file or the
new complete file, never a mixture.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Callable


def fsync_dir(directory: str | Path) -> None:
    """Make a rename inside ``directory`` durable (no-op where directories cannot be opened)."""
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def fsync_file(path: str | Path) -> None:
    """Flush a closed file's data to disk."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def atomic_write(path: str | Path, write: Callable[[Path], None], tmp_suffix: str = ".tmp",
                 before_replace: Callable[[], None] | None = None) -> Path:
    """Write ``path`` atomically.

    Parameters
    ----------
    path
        Final file name.
    write
        Called with the temporary path; must create and close that file.
    tmp_suffix
        Appended to the file name for the temporary file.
    before_replace
        Called after the temporary file is complete and durable, just before the rename
        (e.g. to keep the previous file as a backup).

    Returns
    -------
    Path
        The final path. On any error the temporary file is removed and the error re-raised;
        the previous ``path`` is untouched.
    """
    path = Path(path)
    tmp = path.with_name(path.name + tmp_suffix)
    try:
        write(tmp)
        fsync_file(tmp)
        if before_replace is not None:
            before_replace()
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    fsync_dir(path.parent)
    return path


def atomic_copy_bytes(src: str | Path, dst: str | Path) -> None:
    """Copy ``src`` to ``dst`` atomically, preferring a hard link (no data copied)."""
    src, dst = Path(src), Path(dst)
    tmp = dst.with_name(dst.name + ".tmp")
    tmp.unlink(missing_ok=True)
    try:
        os.link(src, tmp)
    except OSError:
        with open(src, "rb") as fi, open(tmp, "wb") as fo:
            while block := fi.read(1 << 22):
                fo.write(block)
            fo.flush()
            os.fsync(fo.fileno())
    os.replace(tmp, dst)
    fsync_dir(dst.parent)
