"""Writing session files of format 3: a static part written once, a state part on every save.

Events, features and the first pass's own result (``first_pass``: the state the journal's
opening step produced, from which reopening replays the curation) never change after the first
pass, so they live in a static part,
``NAME.static-<digest>.h5``, named by the first 16 hex digits of its checksum. It is written
(atomically) only when no file of that name holds that checksum yet; a new sorting saved under
the same name gets a new static part and never disturbs the one an older state (a backup)
refers to. The state part (recording, parameters, assignments, units, journal) is the file the
user names; every save and autosave writes it whole and atomically. It records the static
part's file name and checksum, so it belongs to exactly one static part. After a save, static parts
of earlier sortings that no session file in the folder names any more are deleted
(:func:`prune_static_parts`).

Checksums are computed from the arrays being written (per dataset, see
:func:`rigside.core.io.h5safe.read_verified`), never by reading a file back.
"""

from __future__ import annotations

import contextlib
import json
import re
from concurrent.futures import Future, ThreadPoolExecutor
from pathlib import Path
from typing import Any, Iterator

import h5py
import numpy as np

from rigside.core import __version__
from rigside.core.io.atomic import atomic_write_named, safe_unlink
from rigside.core.io.h5image import Store, h5_direct
from rigside.core.io.h5safe import CHECKSUM_ATTR, dataset_digest, read_verified, write_text
from rigside.core.units.session_labels import labels_to_text
from rigside.core.units.session_numbers import write_table

FORMAT = "rigside session"
STATIC_FORMAT = "rigside session static part"
FORMAT_VERSION = 3
STATIC_NAME_ATTR, STATIC_CHECKSUM_ATTR = "static_part", "static_checksum"
LIBVER = ("v110", "latest")
FIRST_PASS = "first_pass"
"""Static-part group holding the sorting right after its first pass (for rebuilding the undo history)."""


def static_path(main: str | Path, digest: str) -> Path:
    """``NAME.static-<16 hex digits>.h5`` beside the main file ``NAME``."""
    p = Path(main)
    return p.with_name(f"{p.name}.static-{digest[:16]}.h5")


class _Hashed:
    """Stores arrays into a file being written (:func:`rigside.core.io.h5image.h5_direct`), each
    hashed on a worker thread while the next is written, then seals the file with its checksum."""

    def __init__(self, f: h5py.File, store: Store, pool: ThreadPoolExecutor) -> None:
        self.f, self.store, self.pool = f, store, pool
        self.known: dict[str, np.ndarray] = {}
        self.digests: dict[str, Future] = {}

    def __call__(self, g: h5py.Group, name: str, arr: np.ndarray) -> h5py.Dataset:
        full = f"{g.name.strip('/')}/{name}"
        self.known[full] = arr = np.ascontiguousarray(arr)
        self.digests[full] = self.pool.submit(dataset_digest, arr)
        return self.store(g, name, arr)

    def seal(self) -> str:
        """Store and return the file's checksum (the arrays hashed from memory, never read back)."""
        self.f.flush()
        _, digest = read_verified(self.f, "", size=self.f.id.get_filesize(), per_dataset=True, known=self.known,
                                  digests=self.digests)
        self.f.attrs[CHECKSUM_ATTR] = digest
        return digest


@contextlib.contextmanager
def _written(tmp: Path) -> Iterator[tuple[h5py.File, _Hashed]]:
    with ThreadPoolExecutor(2) as pool, h5_direct(tmp, libver=LIBVER) as (f, store):
        yield f, _Hashed(f, store, pool)


def _fill_static(tmp: Path, session: Any) -> str:
    """Write the static part to ``tmp``; returns its checksum."""
    data = session.sorting.data
    with _written(tmp) as (f, store):
        f.attrs.update(format=STATIC_FORMAT, format_version=FORMAT_VERSION)
        session.events.to_h5_group(f.create_group("events"), store=store)
        feat = f.create_group("features")
        store(feat, "values", data.features)
        feat.attrs["names"] = json.dumps(list(data.feature_names))
        origin = session.sorting.origin
        if origin is not None:
            _write_units(f.create_group(FIRST_PASS), origin.assignments, origin.units, origin.next_id, store)
        return store.seal()


def _write_units(g: h5py.Group, assignments: np.ndarray, units: dict, next_id: int, store: Store) -> None:
    """Assignments, unit columns and id counter of one sorting state into ``g`` (each dataset by ``store``)."""
    store(g, "assignments", assignments)
    store(g, "unit_id", np.array(list(units), dtype=np.int32))
    store(g, "unit_group", np.array([u.group for u in units.values()], dtype=np.int32))
    write_text(g, "labels", labels_to_text([u.label for u in units.values()]), store)
    write_text(g, "notes", json.dumps([u.note for u in units.values()]), store)
    g.attrs["next_id"] = np.int64(next_id)


def stored_checksum(path: Path) -> str | None:
    """The checksum attribute of the HDF5 file at ``path`` (None if absent or unreadable)."""
    try:
        with h5py.File(path, "r") as f:
            value = f.attrs.get(CHECKSUM_ATTR)
    except (OSError, KeyError, ValueError):
        return None
    return value if isinstance(value, str) else None


def ensure_static(main: Path, session: Any) -> tuple[str, str]:
    """Write the session's static part beside ``main`` unless it is there already.

    The checksum is kept on the session (with the arrays it was computed from), so later
    saves neither rebuild nor rewrite it; a session without one writes its static part
    (hashing each array while the next is written) and keeps it unless a file of that name
    holds that checksum already. Returns the static part's file name and checksum.
    """
    cache = session.static_cache
    if cache is not None and all(a is b for a, b in zip(cache[:3], _static_key(session))):
        digest = cache[3]
        if stored_checksum(static_path(main, digest)) != digest:
            _write_static(main, session)
    else:
        digest = _write_static(main, session)
    session.static_cache = (*_static_key(session), digest)
    return static_path(main, digest).name, digest


def _write_static(main: Path, session: Any) -> str:
    """Write the static part beside ``main`` atomically, named by its checksum; returns the checksum."""
    def name(digest: str) -> Path | None:
        target = static_path(main, digest)
        return None if stored_checksum(target) == digest else target
    return atomic_write_named(main, lambda tmp: _fill_static(tmp, session), name)[1]


def _static_key(session: Any) -> tuple:
    """What a static part is made of, compared by identity: events, features, first-pass state."""
    return (session.events, session.sorting.data.features, session.sorting.origin)


def write_state(tmp: Path, session: Any, saved_utc: str, static: tuple[str, str]) -> None:
    """Write the state part of ``session`` to ``tmp``."""
    sorting, ref = session.sorting, session.recording
    with _written(tmp) as (f, store):
        f.attrs.update(format=FORMAT, format_version=FORMAT_VERSION, program_version=__version__,
                       saved_utc=saved_utc, **{STATIC_NAME_ATTR: static[0], STATIC_CHECKSUM_ATTR: static[1]})
        rec = f.create_group("recording")
        rec.attrs.update(path=ref.path, size=np.int64(ref.size), fingerprint=ref.fingerprint,
                         content_hash=ref.content_hash, description=json.dumps(ref.description, allow_nan=False))
        f.create_group("params").attrs["json"] = json.dumps(session.params.to_dict(), allow_nan=False)
        _write_units(f.create_group("sorting"), sorting.assignments, sorting.units, sorting.next_id, store)
        write_text(f.create_group("journal"), "lines", sorting.journal.to_text(), store)
        if session.unit_numbers is not None:
            write_table(f, session.unit_numbers, store)
        store.seal()


def _attrs(path: Path) -> dict | None:
    """Root attributes of the HDF5 file at ``path`` (None if it is not one or cannot be read)."""
    try:
        with h5py.File(path, "r") as f:
            return dict(f.attrs)
    except (OSError, KeyError, ValueError):
        return None


def prune_static_parts(main: str | Path, states: list[Path]) -> list[Path]:
    """Delete the static parts beside ``main`` that no session file in its folder refers to.

    Only files named ``NAME.static-<16 hex digits>.h5`` whose own attributes say they are a
    static part with that checksum are candidates (nothing else is ever deleted). Every session
    state file in the folder (any HDF5 file, whatever its name, whose format is a session's)
    keeps the part it names; if one of ``states`` (the main file, its backup, its autosave)
    exists but cannot be read, nothing is deleted. Returns the deleted paths.
    """
    main = Path(main)
    pattern = re.compile(rf"^{re.escape(main.name)}\.static-([0-9a-f]{{16}})\.h5$")
    candidates, referred = {}, set()
    for p in main.parent.iterdir():
        m = pattern.match(p.name)
        if m:
            candidates[p] = m.group(1)
        elif (p.is_file() and h5py.is_hdf5(p)) or p in states:   # any name: NAME.bak.3, copies, temporaries
            attrs = _attrs(p)
            if attrs is None and p in states:
                return []
            if attrs is not None and attrs.get("format") == FORMAT:
                referred.add(str(attrs.get(STATIC_NAME_ATTR, "")))
    removed = []
    for p, digest in sorted(candidates.items()):
        attrs = _attrs(p)
        ours = attrs is not None and attrs.get("format") == STATIC_FORMAT and \
            str(attrs.get(CHECKSUM_ATTR, "")).startswith(digest)
        if ours and p.name not in referred:
            safe_unlink(p)
            removed.append(p)
    return removed
