"""Safe file writes: inputs are never touched, outputs appear whole or not at all.

Every write goes through :func:`atomic_write`: a temporary file with a unique name beside the
target (created exclusively, so it can never be an existing file), flushed, fsynced and
renamed. A reader (or a process restarted after a crash) sees either the old complete file or
the new complete file, never a mixture. A failed write (full disk, quota, file size limit)
removes the temporary file, keeps the previous file and raises :class:`WriteError`.

A command declares its inputs with :func:`protect_inputs`; while it runs, no write, rename or
delete made through this module may land on one of them (compared by resolved path and by
file identity, so symbolic and hard links are caught).
"""

from __future__ import annotations

import contextlib
import contextvars
import glob
import os
import tempfile
from pathlib import Path
from typing import Callable, Iterable, Iterator, TypeVar

from rigside.core.errors import ParamError, RigsideError

T = TypeVar("T")

_INPUTS: contextvars.ContextVar[tuple[tuple[str, tuple[int, int] | None, str], ...]] = \
    contextvars.ContextVar("rigside_inputs", default=())
_UMASK = os.umask(0)
os.umask(_UMASK)


class InputClash(RigsideError):
    """An output, temporary, backup or checkpoint path is one of the command's inputs."""


class WriteError(RigsideError):
    """A file could not be written (full disk, quota, size limit, permissions)."""


def _identity(path: str | Path) -> tuple[str, tuple[int, int] | None]:
    real = os.path.realpath(path)
    try:
        st = os.stat(real)
    except OSError:
        return real, None
    return real, (st.st_dev, st.st_ino)


@contextlib.contextmanager
def protect_inputs(paths: Iterable[str | Path | None]) -> Iterator[None]:
    """Within the block, refuse every write, rename or delete onto one of ``paths``."""
    added = tuple((*_identity(p), str(p)) for p in paths if p is not None and str(p))
    token = _INPUTS.set(_INPUTS.get() + added)
    try:
        yield
    finally:
        _INPUTS.reset(token)


def protected_inputs() -> list[str]:
    """The input paths protected at this point (for passing to another process)."""
    return [given for _, _, given in _INPUTS.get()]


def check_not_input(path: str | Path, what: str = "output") -> Path:
    """Raise :class:`InputClash` when ``path`` is, or resolves to, a protected input."""
    real, ident = _identity(path)
    for in_real, in_ident, given in _INPUTS.get():
        if real == in_real or (ident is not None and ident == in_ident):
            raise InputClash(f"{what} must not be one of the inputs, got {str(path)!r} (the input {given!r})")
    return Path(path)


def _write_failed(path: Path, exc: OSError) -> WriteError:
    reason = exc.strerror or str(exc)
    return WriteError(f"output {str(path)!r} must be written completely, got {reason} "
                      f"(nothing written there; any previous file is kept)")


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
    """Flush a closed file's data to disk (opened for writing where a read-only handle cannot be
    flushed, as on Windows)."""
    try:
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
            return
        finally:
            os.close(fd)
    except OSError:
        pass
    with open(path, "r+b") as fh:
        os.fsync(fh.fileno())


def temporary_beside(path: str | Path) -> Path:
    """Create an empty file with a unique name in ``path``'s folder (``.NAME.<random>.tmp``)."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    os.chmod(tmp, 0o666 & ~_UMASK)
    return Path(tmp)


def stale_temporaries(path: str | Path) -> list[Path]:
    """Temporary files :func:`temporary_beside` made for ``path`` and left behind."""
    path = Path(path)
    return sorted(path.parent.glob(f".{glob.escape(path.name)}.*.tmp"))


def atomic_write(path: str | Path, write: Callable[[Path], None],
                 before_replace: Callable[[], None] | None = None) -> Path:
    """Write ``path`` atomically.

    Parameters
    ----------
    path
        Final file name; must not be a protected input.
    write
        Called with the temporary path (an existing empty file); must write and close it.
    before_replace
        Called after the temporary file is complete and durable, just before the rename
        (e.g. to keep the previous file as a backup).

    Returns
    -------
    Path
        The final path. On any error the temporary file is removed and the previous ``path``
        is untouched; an ``OSError`` becomes :class:`WriteError`.
    """
    path = check_not_input(path)
    atomic_write_named(path, write, lambda _: path, before_replace)
    return path


def atomic_write_named(beside: str | Path, write: Callable[[Path], T], name: Callable[[T], Path | None],
                       before_replace: Callable[[], None] | None = None) -> tuple[Path | None, T]:
    """Write a file atomically whose name depends on what was written (e.g. its checksum).

    ``write(tmp)`` fills a temporary file beside ``beside`` and returns a value; ``name(value)``
    gives the final path (checked as in :func:`atomic_write`), or None when no file is wanted
    after all (the temporary file is removed). Returns the final path (or None) and the value;
    errors are handled as in :func:`atomic_write`.
    """
    beside = Path(beside)
    try:
        tmp = temporary_beside(beside)
    except OSError as exc:
        raise _write_failed(beside, exc) from None
    final: Path | None = beside
    try:
        value = write(tmp)
        final = name(value)
        if final is None:
            tmp.unlink()
            return None, value
        final = check_not_input(final)
        fsync_file(tmp)
        if before_replace is not None:
            before_replace()
        os.replace(tmp, final)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise _write_failed(final or beside, exc) from None
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    fsync_dir(final.parent)
    return final, value


def atomic_copy_bytes(src: str | Path, dst: str | Path) -> None:
    """Copy ``src`` to ``dst`` atomically, preferring a hard link (no data copied)."""
    src, dst = Path(src), check_not_input(dst, "copy target")

    def write(tmp: Path) -> None:
        tmp.unlink()
        try:
            os.link(src, tmp)
            return
        except OSError:
            pass
        with open(src, "rb") as fi, open(tmp, "wb") as fo:
            while block := fi.read(1 << 22):
                fo.write(block)
    atomic_write(dst, write)


def safe_unlink(path: str | Path) -> None:
    """Delete ``path`` if it exists, unless it is a protected input."""
    check_not_input(path, "file to delete")
    Path(path).unlink(missing_ok=True)


def free_backup_path(path: str | Path) -> Path:
    """The first of ``NAME.bak``, ``NAME.bak.1``, ``NAME.bak.2``, ... that does not exist."""
    base = Path(str(path) + ".bak")
    candidate, n = base, 0
    while candidate.exists() or candidate.is_symlink():
        n += 1
        candidate = Path(f"{base}.{n}")
    return candidate


def check_output(out: str | Path, *protected: str | Path | None, suffixes: tuple[str, ...] = ()) -> Path:
    """Refuse an output path that is an input file (``protected`` or the command's inputs),
    a directory, or has the wrong suffix."""
    out = Path(out)
    if suffixes and out.suffix.lower() not in suffixes:
        raise ParamError(f"output file must end in {' or '.join(suffixes)}, got {str(out)!r}")
    if out.is_dir():
        raise ParamError(f"output must be a file path, got the directory {str(out)!r}")
    if not out.parent.exists():
        raise ParamError(f"output folder must exist, got {str(out.parent)!r}")
    with protect_inputs(protected):
        return check_not_input(out)
