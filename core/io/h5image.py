"""HDF5 files built in memory and written with ordinary file I/O.

A write that fails inside the HDF5 library (full disk, file size limit) can leave it in a
state that crashes the process later; building the file in memory and writing its bytes
with Python's own I/O turns every such failure into an ``OSError``.
"""

from __future__ import annotations

import contextlib
from pathlib import Path
from typing import Callable, Iterator, TypeVar

import h5py

T = TypeVar("T")


@contextlib.contextmanager
def memory_file(name: str, file_options: dict) -> Iterator[h5py.File]:
    """An HDF5 file open for writing in memory only (take its bytes with ``f.id.get_file_image()``)."""
    f = h5py.File(f"{name}.image", "w", driver="core", backing_store=False, **file_options)
    try:
        yield f
    finally:
        f.close()


@contextlib.contextmanager
def h5_in_memory(tmp: str | Path, **file_options) -> Iterator[h5py.File]:
    """An HDF5 file open for writing in memory; written to ``tmp`` when the block ends without error.

    ``file_options`` go to :class:`h5py.File` (e.g. ``libver``). Nothing touches the disk
    until the block has finished; then the whole image is written at once.
    """
    with memory_file(str(tmp), file_options) as f:
        yield f
        f.flush()
        image = f.id.get_file_image()
    with open(tmp, "wb") as fh:
        fh.write(image)


def h5_image(fill: Callable[[h5py.File], T], name: str = "image", **file_options) -> tuple[bytes, T]:
    """Build an HDF5 file in memory with ``fill(f)``; returns its bytes and what ``fill`` returned
    (write the bytes with ordinary file I/O, e.g. through :func:`rigside.core.io.atomic.atomic_write`)."""
    with memory_file(name, file_options) as f:
        result = fill(f)
        f.flush()
        return f.id.get_file_image(), result


def write_h5(tmp: str | Path, fill: Callable[[h5py.File], None], **file_options) -> None:
    """Create the HDF5 file ``tmp`` from ``fill(f)`` (see :func:`h5_in_memory`)."""
    with h5_in_memory(tmp, **file_options) as f:
        fill(f)
