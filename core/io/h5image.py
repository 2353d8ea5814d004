"""HDF5 files built in memory and written with ordinary file I/O.

A write that fails inside the HDF5 library (full disk, file size limit) can leave it in a
state that crashes the process later; building the file in memory and writing its bytes
with Python's own I/O turns every such failure into an ``OSError``.

Files holding large arrays (:func:`h5_direct`) are not copied whole into memory: the library
writes only its metadata and small datasets, into pages kept in memory; the bytes of each
large array go straight from the array to the target file at the place the library reserved
for them (contiguous storage, allocated when the dataset is created, never filled).
"""

from __future__ import annotations

import contextlib
from pathlib import Path
from typing import BinaryIO, Callable, Iterator, TypeVar

import h5py
import numpy as np

T = TypeVar("T")
DIRECT_BYTES = 1 << 16
"""Arrays of at least this many bytes are written by :func:`h5_direct` straight to the file."""


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


class _Pages:
    """A sparse in-memory file for the HDF5 library (its "fileobj" driver): what it writes is kept
    in pages; bytes never written read as zeros and take no memory."""

    SIZE = 1 << 16

    def __init__(self) -> None:
        self.pages: dict[int, bytearray] = {}
        self.pos = self.size = 0

    def seekable(self) -> bool:
        return True

    def seek(self, offset: int, whence: int = 0) -> int:
        self.pos = offset + (0, self.pos, self.size)[whence]
        return self.pos

    def tell(self) -> int:
        return self.pos

    def _spans(self, n: int) -> Iterator[tuple[int, int, int, int]]:
        """(page, offset in page, offset in buffer, length) of ``n`` bytes from the position."""
        done = 0
        while done < n:
            page, at = divmod(self.pos + done, self.SIZE)
            k = min(n - done, self.SIZE - at)
            yield page, at, done, k
            done += k

    def readinto(self, buf) -> int:
        mv = memoryview(buf).cast("B")
        for page, at, done, k in self._spans(len(mv)):
            stored = self.pages.get(page)
            mv[done:done + k] = stored[at:at + k] if stored is not None else bytes(k)
        self.pos += len(mv)
        return len(mv)

    def read(self, n: int = -1) -> bytes:
        buf = bytearray(max(0, self.size - self.pos) if n < 0 else n)
        self.readinto(buf)
        return bytes(buf)

    def write(self, data) -> int:
        mv = memoryview(data).cast("B")
        for page, at, done, k in self._spans(len(mv)):
            self.pages.setdefault(page, bytearray(self.SIZE))[at:at + k] = mv[done:done + k]
        self.pos += len(mv)
        self.size = max(self.size, self.pos)
        return len(mv)

    def truncate(self, size: int | None = None) -> int:
        self.size = self.pos if size is None else size
        for page in [p for p in self.pages if p * self.SIZE >= self.size]:
            del self.pages[page]
        return self.size

    def flush(self) -> None:
        pass

    def write_to(self, fh: BinaryIO, reserved: list[tuple[int, int]]) -> None:
        """Write the pages to ``fh`` except the byte ranges ``reserved`` (the large arrays'), then
        set the file's length."""
        reserved = sorted(reserved)
        for page in sorted(self.pages):
            start, end = page * self.SIZE, min((page + 1) * self.SIZE, self.size)
            for lo, hi in [*reserved, (end, end)]:        # the gaps before each reserved range
                if start < min(lo, end):
                    fh.seek(start)
                    fh.write(memoryview(self.pages[page])[start - page * self.SIZE:min(lo, end) - page * self.SIZE])
                start = max(start, hi)
                if start >= end:
                    break
        fh.truncate(self.size)


def _reserved_dcpl():
    """Dataset creation: contiguous, space allocated at creation, never filled by the library."""
    dcpl = h5py.h5p.create(h5py.h5p.DATASET_CREATE)
    dcpl.set_layout(h5py.h5d.CONTIGUOUS)
    dcpl.set_alloc_time(h5py.h5d.ALLOC_TIME_EARLY)
    dcpl.set_fill_time(h5py.h5d.FILL_TIME_NEVER)
    return dcpl


Store = Callable[[h5py.Group, str, np.ndarray], h5py.Dataset]


@contextlib.contextmanager
def h5_direct(tmp: str | Path, **file_options) -> Iterator[tuple[h5py.File, Store]]:
    """An HDF5 file written to the existing file ``tmp`` (truncated) without passing its large
    arrays through the library or through a copy in memory.

    Yields the open file and ``store(group, name, array)``, which creates a dataset holding
    ``array``: arrays of :data:`DIRECT_BYTES` or more are written at once to ``tmp`` by ordinary
    file I/O, smaller ones through the library. The metadata are written when the block ends
    without error. A failed write raises ``OSError`` (the library only ever touches memory).
    """
    pages, reserved = _Pages(), []
    with open(tmp, "r+b") as fh:
        fh.truncate(0)

        def store(g: h5py.Group, name: str, array: np.ndarray) -> h5py.Dataset:
            array = np.ascontiguousarray(array)
            if array.nbytes < DIRECT_BYTES:
                return g.create_dataset(name, data=array)
            ds = g.create_dataset(name, shape=array.shape, dtype=array.dtype, dcpl=_reserved_dcpl())
            at = ds.id.get_offset()
            fh.seek(at)
            fh.write(memoryview(array.reshape(-1).view(np.uint8)))
            reserved.append((at, at + array.nbytes))
            return ds

        f = h5py.File(pages, "w", **file_options)
        try:
            yield f, store
        finally:
            f.close()
        pages.write_to(fh, reserved)
