"""Careful reading of HDF5 files we did not necessarily write: a content checksum computed
over every group, dataset and attribute, with limits checked before any data is read.

Only hard links to plain groups and numeric datasets (bool, integer, float; at most 2-D)
are accepted; attributes must be text, numbers or small numeric arrays. The total size the
datasets declare is bounded by a multiple of the file size, so a file declaring huge
shapes is refused before anything is allocated.
"""

from __future__ import annotations

import hashlib
import math
import os
from concurrent.futures import Future, ThreadPoolExecutor
from pathlib import Path
from typing import Any, Callable, Mapping

import h5py
import numpy as np

from rigside.core.errors import RigsideError, SessionError

MAX_OBJECTS = 1000
MAX_DEPTH = 4
MAX_EXPANSION = 64
"""Declared dataset bytes may exceed the file size by at most this factor (plus 64 MiB)."""
CHECKSUM_ATTR = "checksum"


def _join(where: str, name: str) -> str:
    return f"{where.rstrip('/')}/{name}"


def _hash_attr(h, name: str, value: Any, where: str) -> None:
    h.update(b"A" + name.encode("utf-8") + b"\0")
    if isinstance(value, bytes):
        value = value.decode("utf-8", errors="strict")
    if isinstance(value, str):
        h.update(b"s" + value.encode("utf-8") + b"\0")
        return
    arr = np.asarray(value)
    if arr.dtype.kind not in "biuf" or arr.dtype.names is not None or arr.size > 4096:
        raise SessionError(f"session attribute {_join(where, name)} must be text or a small numeric value, "
                           f"got {arr.dtype} of size {arr.size}")
    h.update(b"n" + arr.dtype.str.encode() + repr(arr.shape).encode() + arr.tobytes())


def _hash_attrs(h, obj, where: str, skip: tuple[str, ...] = ()) -> None:
    for name in sorted(obj.attrs):
        if name in skip:
            continue
        try:
            value = obj.attrs[name]
        except (OSError, TypeError, ValueError) as exc:
            raise SessionError(f"session attribute {_join(where, name)} must be readable, got {exc}") from None
        _hash_attr(h, name, value, where)


def _check_dataset(ds: h5py.Dataset, where: str) -> int:
    dt = ds.dtype
    if dt.kind not in "biuf" or dt.names is not None or dt.subdtype is not None or ds.ndim > 2:
        raise SessionError(f"session dataset {where} must be a numeric array of at most 2 dimensions, "
                           f"got {dt} with shape {ds.shape}")
    return int(math.prod(ds.shape)) * dt.itemsize


def _members(g: h5py.Group, where: str) -> list[tuple[str, Any]]:
    out = []
    for name in sorted(g):
        link = g.get(name, getlink=True)
        if not isinstance(link, h5py.HardLink):
            raise SessionError(f"session object {_join(where, name)} must be stored in the file, got a "
                               f"{type(link).__name__}")
        out.append((name, g[name]))
    return out


def _structure(f: h5py.File, size: int, h) -> list[tuple[str, h5py.Dataset]]:
    """Check the structure and limits of ``f``, hashing groups and their attributes into ``h``;
    returns the datasets by slash path."""
    budget = MAX_EXPANSION * size + (64 << 20)
    datasets: list[tuple[str, h5py.Dataset]] = []
    stack: list[tuple[str, h5py.Group, int]] = [("", f, 0)]
    n_objects = 0
    declared = 0
    while stack:
        where, g, depth = stack.pop(0)
        h.update(b"G" + where.encode("utf-8") + b"\0")
        _hash_attrs(h, g, where, skip=(CHECKSUM_ATTR,) if not where else ())
        for name, obj in _members(g, where):
            n_objects += 1
            full = _join(where, name) if where else name
            if n_objects > MAX_OBJECTS or depth >= MAX_DEPTH:
                raise SessionError(f"session file must hold at most {MAX_OBJECTS} objects nested at most "
                                   f"{MAX_DEPTH} deep, got more at {full}")
            if isinstance(obj, h5py.Group):
                stack.append((full, obj, depth + 1))
            elif isinstance(obj, h5py.Dataset):
                declared += _check_dataset(obj, full)
                datasets.append((full, obj))
            else:
                raise SessionError(f"session object {full} must be a group or dataset, got {type(obj).__name__}")
    if declared > budget:
        raise SessionError(f"session datasets must fit the file's size ({size} bytes), "
                           f"got {declared} bytes declared")
    return datasets


def _raw(arr: np.ndarray) -> memoryview:
    """The bytes of a C-contiguous array without copying them."""
    return memoryview(arr.reshape(-1).view(np.uint8))


def dataset_digest(arr: np.ndarray) -> bytes:
    """SHA-256 of an array's bytes in C order (a dataset's part of a format-3 checksum)."""
    return hashlib.sha256(_raw(np.ascontiguousarray(arr))).digest()


def _data_of(full: str, ds: h5py.Dataset, known: Mapping[str, np.ndarray] | None) -> np.ndarray:
    if known is not None and full in known:
        arr = np.ascontiguousarray(known[full])
        if arr.shape != ds.shape or arr.dtype != ds.dtype:
            raise ValueError(f"array given for {full} must be what the file stores ({ds.dtype} {ds.shape}), "
                             f"got {arr.dtype} {arr.shape}")
        return arr
    try:
        arr = ds[()]
    except (OSError, ValueError, TypeError) as exc:
        raise SessionError(f"session dataset {full} must be readable, got {exc}") from None
    return np.ascontiguousarray(arr)


def read_verified(f: h5py.File, path: str | Path, size: int | None = None, per_dataset: bool = False,
                  known: Mapping[str, np.ndarray] | None = None,
                  digests: Mapping[str, Future] | None = None) -> tuple[dict[str, np.ndarray], str]:
    """Read every dataset of an open file after checking its structure, and hash it all.

    Parameters
    ----------
    f, path
        The open file and its path.
    size
        The file's size in bytes (default: the size of ``path`` on disk; give it for a file
        still being built in memory).
    per_dataset
        Hash each dataset's bytes on its own (SHA-256, on worker threads while the next
        dataset is read) and the structure with those digests (session format 3); otherwise
        one SHA-256 over everything (formats 1 and 2).
    known
        Arrays by slash path that the file holds and the caller already has (a file just
        written from them): hashed from memory instead of read back.
    digests
        :func:`dataset_digest` of some of ``known``, already being computed (futures), e.g. while
        the file was written (``per_dataset`` only).

    Returns
    -------
    data, digest
        Arrays by slash path (e.g. ``"sorting/assignments"``) and the SHA-256 hex digest of
        the structure, attributes (except the root checksum) and data.
    """
    h = hashlib.sha256()
    datasets = _structure(f, os.path.getsize(path) if size is None else size, h)
    data: dict[str, np.ndarray] = {}
    with ThreadPoolExecutor(2) as pool:
        parts = []
        for full, ds in datasets:
            arr = data[full] = _data_of(full, ds, known)
            if not per_dataset:
                parts.append(arr)
            else:
                given = digests is not None and full in digests and known is not None and full in known
                parts.append(digests[full] if given else pool.submit(dataset_digest, arr))
        for (full, ds), part in zip(datasets, parts):
            arr = data[full]
            h.update(b"D" + full.encode("utf-8") + b"\0" + arr.dtype.str.encode() + repr(arr.shape).encode())
            _hash_attrs(h, ds, full)
            h.update(part.result() if per_dataset else _raw(arr))
    return data, h.hexdigest()


def attr(obj, name: str, kind: type, where: str):
    """A typed attribute: ``str``, ``int`` or ``float`` (finite), else :class:`SessionError`."""
    if name not in obj.attrs:
        raise SessionError(f"session attribute {_join(where, name)} must be present, got none")
    v = obj.attrs[name]
    if kind is str:
        if isinstance(v, bytes):
            try:
                v = v.decode("utf-8")
            except UnicodeDecodeError:
                raise SessionError(f"session attribute {_join(where, name)} must be UTF-8 text, got bytes") from None
        if isinstance(v, str):
            return v
    elif kind is int:
        if isinstance(v, (int, np.integer)) and not isinstance(v, (bool, np.bool_)):
            return int(v)
    elif kind is float:
        if isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, (bool, np.bool_)) \
                and math.isfinite(float(v)):
            return float(v)
    raise SessionError(f"session attribute {_join(where, name)} must be {kind.__name__}, got {str(v)[:40]!r}")


def array(data: dict[str, np.ndarray], name: str, dtype: str, ndim: int) -> np.ndarray:
    """A dataset of the given kind and item size (any byte order) and dimension count."""
    if name not in data:
        raise SessionError(f"session dataset {name} must be present, got none")
    a = data[name]
    want = np.dtype(dtype)
    if a.dtype.kind != want.kind or a.dtype.itemsize != want.itemsize or a.ndim != ndim:
        raise SessionError(f"session dataset {name} must be {want} with {ndim} dimensions, "
                           f"got {a.dtype} with shape {a.shape}")
    return a.astype(want, copy=False)


def text(data: dict[str, np.ndarray], name: str) -> str:
    """UTF-8 text stored as a uint8 dataset."""
    raw = array(data, name, "u1", 1)
    try:
        return raw.tobytes().decode("utf-8")
    except UnicodeDecodeError:
        raise SessionError(f"session dataset {name} must hold UTF-8 text, got undecodable bytes") from None


def write_text(g: h5py.Group, name: str, value: str,
               store: Callable[[h5py.Group, str, np.ndarray], object] | None = None) -> None:
    """Store text as a uint8 dataset (attributes are limited to 64 KiB), by ``store(g, name, bytes)``
    if given."""
    raw = np.frombuffer(value.encode("utf-8"), dtype=np.uint8)
    if store is None:
        g.create_dataset(name, data=raw)
    else:
        store(g, name, raw)


def stored_dataset(f: h5py.File, name: str, allow_external: bool,
                   error: type[RigsideError] = RigsideError) -> h5py.Dataset:
    """The dataset ``name`` of a file we did not write, refused (``error``) when its data live in
    other files (external link, external storage, virtual dataset; unless ``allow_external``) or
    when the file does not store what its shape declares: a contiguous dataset must have all its
    bytes allocated, a chunked one all its chunks (unwritten data would read as fill values, so
    a tiny file could declare terabytes)."""
    parts = [x for x in name.split("/") if x]
    for i in range(len(parts)):
        link = f.get("/".join(parts[:i + 1]), getlink=True)
        if isinstance(link, h5py.ExternalLink) and not allow_external:
            raise error(f"HDF5 recording dataset must be stored in the file itself (or allow other "
                        f"files with --allow-external), got an external link at {name!r}")
    ds = f[name]
    elsewhere = "a virtual dataset" if ds.is_virtual else "external storage" if ds.external else None
    if elsewhere:
        if not allow_external:
            raise error(f"HDF5 recording dataset must keep its samples in the file itself (or allow "
                        f"other files with --allow-external), got {elsewhere} at {name!r}")
        return ds
    declared = int(math.prod(ds.shape)) * ds.dtype.itemsize
    if ds.chunks:
        expected = math.prod(-(-n // c) for n, c in zip(ds.shape, ds.chunks))
        stored, what = ds.id.get_num_chunks(), "chunks"
    else:
        expected, stored, what = declared, ds.id.get_storage_size(), "bytes"
    if stored < expected:
        raise error(f"HDF5 recording dataset must store the {declared} bytes its shape {ds.shape} "
                    f"declares, got {stored} of {expected} {what} written in {name!r}")
    return ds
