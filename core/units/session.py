"""Session files: one HDF5 file of our own layout holding a whole sorting session.

Layout (format version 3): two HDF5 files (see :mod:`rigside.core.units.session_write`)::

    NAME (state part)  attrs format="rigside session", format_version, program_version, saved_utc,
                       static_part (file name of the static part beside NAME), static_checksum,
                       checksum (see rigside.core.io.h5safe.read_verified, per_dataset)
      /recording       attrs path, size, fingerprint, description (JSON), content_hash
                       ("xxh3-128:<hex>", older "sha256:<hex>", of the whole file: core.io.content; may be empty)
      /params          attrs json (Params.to_dict() as JSON)
      /sorting/assignments  int32 unit id per event (-1: in no unit)
      /sorting/unit_id, unit_group (int32)
      /sorting/labels  UTF-8 JSON list of one label name per unit (uint8 dataset)
      /sorting/notes   UTF-8 JSON list of one note per unit (uint8 dataset); attrs next_id
      /journal/lines   UTF-8 JSON lines (uint8 dataset)
      /unit_numbers    optional: the quality numbers at saving (see rigside.core.units.session_numbers)
    NAME.static-<digest>.h5  attrs format="rigside session static part", format_version, checksum
      /events          the event table (EventTable.to_h5_group, uncompressed)
      /features/values float32 events x features;   attrs names (JSON list)

Formats 1 and 2 kept both parts in one file (one SHA-256 over everything); they are still read.
Format 1 stored labels as codes instead of ``/sorting/labels``; it is still read (see
:mod:`rigside.core.units.session_labels`). No pickled or executable content is written or accepted.
Saving is atomic: a temporary file beside ``NAME`` is written (:func:`rigside.core.io.h5image.h5_direct`),
fsynced and renamed over ``NAME``; the previous ``NAME`` (if it verifies) becomes ``NAME.bak`` first.
Only the state part is written on every save. ``NAME.autosave.h5`` (:func:`save_autosave`) is a state part
of the same static part; :mod:`rigside.core.units.session_recovery` finds the newest consistent state.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from types import SimpleNamespace

import h5py
import numpy as np

from rigside.core import __version__
from rigside.core.errors import ParamError, RigsideError, SessionError
from rigside.core.events import COLUMNS, EventTable
from rigside.core.io.atomic import atomic_copy_bytes, atomic_write, safe_unlink
from rigside.core.io.content import content_hash
from rigside.core.io.h5safe import CHECKSUM_ATTR, array, attr, read_verified, text
from rigside.core.io.recording import Recording
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn
from rigside.core.textparse import parse_json
from rigside.core.units.journal import Journal, utc_now
from rigside.core.units.session_labels import read_labels, upgrade_format1_journal
from rigside.core.units.session_numbers import StoredTable, read_table
from rigside.core.units.session_write import (
    FIRST_PASS,
    FORMAT,
    FORMAT_VERSION,
    STATIC_CHECKSUM_ATTR,
    STATIC_FORMAT,
    STATIC_NAME_ATTR,
    ensure_static,
    prune_static_parts,
    stored_checksum,
    write_state,
)
from rigside.core.units.sorting import Sorting, SortingData, SortingState, Unit


class RecordingMoved(SessionError):
    """The session's recording is not at its recorded path; ask the user where it is and
    load again with ``recording_path_override``."""

    def __init__(self, recorded_path: str, session_path: str) -> None:
        self.recorded_path, self.session_path = recorded_path, session_path
        super().__init__(f"recording of session {session_path!r} must exist at its recorded path, got no "
                         f"file at {recorded_path!r} (moved or renamed?)")


class RecordingChanged(SessionError):
    """The file at the recording path differs from the one the session was made from."""


@dataclass
class RecordingRef:
    """Where the raw recording is and how to recognise it."""

    path: str
    size: int
    fingerprint: str
    description: dict = field(default_factory=dict)
    content_hash: str = ""

    @classmethod
    def from_recording(cls, recording: Recording) -> "RecordingRef":
        """Reference to an open recording (absolute path, size, fingerprint, description and
        the content hash, if a full pass over it has computed one)."""
        p = Path(recording.path).resolve()
        return cls(str(p), p.stat().st_size, recording.fingerprint(), recording.describe(),
                   recording.content_hash or "")


@dataclass
class Session:
    """Everything a session file holds (``source`` is the file it was read from, if any)."""

    recording: RecordingRef
    params: Params
    events: EventTable
    sorting: Sorting
    program_version: str = __version__
    saved_utc: str = ""
    source: Path | None = None
    static_cache: tuple | None = field(default=None, repr=False, compare=False)
    """(events, features, first-pass state, checksum) of the static part last written or read (set by
    saving and loading)."""
    unit_numbers: StoredTable | None = field(default=None, repr=False, compare=False)
    """The per-unit quality numbers stored with the state (see rigside.core.quality.stored_numbers)."""


def snapshot(session: Session) -> Session:
    """A copy of the session whose sorting no longer changes (for saving off the GUI thread)."""
    return replace(session, recording=replace(session.recording), sorting=session.sorting.copy())


def backup_path(path: str | Path) -> Path:
    """``NAME.bak``: the previous good main file."""
    return Path(str(path) + ".bak")


def autosave_path(path: str | Path) -> Path:
    """``NAME.autosave.h5``: the state written by :func:`save_autosave`."""
    p = Path(path)
    return p.with_name(p.name + ".autosave.h5")


def file_fingerprint(path: str | Path) -> str:
    """The fingerprint :meth:`Recording.fingerprint` gives for the file at ``path``."""
    return Recording.fingerprint(SimpleNamespace(path=Path(path)))


# ---- writing -------------------------------------------------------------------------------
def _save(path: Path, session: Session, keep_backup: bool, main: Path) -> Path:
    saved_utc = utc_now()
    static = ensure_static(main, session)

    def rotate() -> None:
        if keep_backup and path.exists():
            try:
                verify_session_file(path)
            except SessionError:
                return          # never let a damaged main file replace the good backup
            atomic_copy_bytes(path, backup_path(path))

    atomic_write(path, lambda tmp: write_state(tmp, session, saved_utc, static), before_replace=rotate)
    session.saved_utc = saved_utc
    return path


def save_session(path: str | Path, session: Session, keep_backup: bool = True) -> Path:
    """Save atomically, keeping the previous good file as ``NAME.bak`` (unless ``keep_backup``
    is False: the caller has kept it elsewhere).

    The autosave file, now older than the saved state, is removed, and so are static parts of
    earlier sortings no session file refers to any more.
    """
    path = Path(path)
    _save(path, session, keep_backup=keep_backup, main=path)
    safe_unlink(autosave_path(path))
    prune_static_parts(path, [path, backup_path(path), autosave_path(path)])
    session.source = path
    return path


def save_autosave(path: str | Path, session: Session) -> Path:
    """Write ``NAME.autosave.h5`` atomically (no backup kept; only the state part unless the
    static part beside ``NAME`` is missing); returns its path."""
    return _save(autosave_path(path), session, keep_backup=False, main=Path(path))


# ---- reading -------------------------------------------------------------------------------
def _open(path: Path, fmt: str = FORMAT, what: str = "session file") -> tuple[h5py.File, dict, str, int]:
    if not path.exists():
        raise SessionError(f"{what} must exist, got no file at {str(path)!r}")
    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise SessionError(f"{what} must be a readable HDF5 file, got {str(path)!r} "
                           f"(truncated, corrupted or another type: {exc})") from None
    try:
        found = attr(f, "format", str, "")
        if found != fmt:
            raise SessionError(f"{what} must have format {fmt!r}, got {found!r}")
        version = attr(f, "format_version", int, "")
        lowest = 1 if fmt == FORMAT else FORMAT_VERSION
        if not lowest <= version <= FORMAT_VERSION:
            raise SessionError(f"session format version must be from {lowest} to {FORMAT_VERSION}, got {version} "
                               f"(saved by rigside {f.attrs.get('program_version', '?')}; update rigside)")
        data, digest = read_verified(f, path, per_dataset=version >= 3)
        if digest != attr(f, CHECKSUM_ATTR, str, ""):
            raise SessionError(f"{what} must match its checksum, got different content in "
                               f"{str(path)!r} (corrupted)")
    except BaseException:
        f.close()
        raise
    return f, data, digest, version


def _static_of(f: h5py.File, path: Path) -> tuple[Path, str]:
    """Where a format-3 state part says its static part is, and the checksum it must have."""
    name = attr(f, STATIC_NAME_ATTR, str, "")
    if name not in ("", ".", "..") and "/" not in name and "\\" not in name:
        return path.parent / name, attr(f, STATIC_CHECKSUM_ATTR, str, "")
    raise SessionError(f"session static part must be a file name beside the session, got {name[:80]!r}")


def verify_session_file(path: str | Path) -> str:
    """Check format and checksum of a session file; returns its save time (UTC ISO).

    For format 3 the static part must exist and carry the checksum the state part names (its
    data are verified when the session is loaded)."""
    path = Path(path)
    try:
        f, _, _, version = _open(path)
        with f:
            if version >= 3:
                static, want = _static_of(f, path)
                if stored_checksum(static) != want:
                    raise SessionError(f"session static part must exist with checksum {want[:16]}..., got "
                                       f"{'a different file' if static.exists() else 'no file'} at {str(static)!r}")
            return attr(f, "saved_utc", str, "")
    except (OSError, KeyError, ValueError, TypeError, MemoryError) as exc:
        if isinstance(exc, SessionError):
            raise
        raise SessionError(f"session file must be a valid rigside session, got {str(path)!r}: {exc}") from None


def _check_recording(ref: RecordingRef, session_path: Path, override: str | Path | None) -> RecordingRef:
    target = Path(override) if override is not None else Path(ref.path)
    if not target.is_file():
        if override is not None:
            raise SessionError(f"recording path must be an existing file, got {str(target)!r}")
        raise RecordingMoved(ref.path, str(session_path))
    size = target.stat().st_size
    if size != ref.size:
        raise RecordingChanged(f"recording {str(target)!r} must be the file this session was made from "
                               f"({ref.size} bytes), got {size} bytes (changed)")
    fp = file_fingerprint(target)
    if fp != ref.fingerprint:
        raise RecordingChanged(f"recording {str(target)!r} must be the file this session was made from "
                               f"(fingerprint {ref.fingerprint}), got fingerprint {fp} (changed content)")
    return RecordingRef(str(target.resolve()), size, fp, ref.description, ref.content_hash)


def _interpret(f: h5py.File, fs: h5py.File, data: dict, path: Path) -> tuple[RecordingRef, Session]:
    """The session in a state part ``f`` and static part ``fs`` (the same file before format 3)
    whose datasets ``data`` have been read and verified."""
    g = f["recording"] if "recording" in f else None
    if g is None:
        raise SessionError("session group recording must be present, got none")
    desc = parse_json(attr(g, "description", str, "recording"), "session recording description", SessionError)
    params_dict = parse_json(attr(f["params"], "json", str, "params"), "session parameters", SessionError)
    names = parse_json(attr(fs["features"], "names", str, "features"), "session feature names", SessionError)
    try:
        if not isinstance(params_dict, dict):
            raise ParamError(f"parameters must be a table, got {str(params_dict)[:40]!r}")
        params = Params.from_dict(params_dict)
        params.validate()
    except (ParamError, AttributeError, TypeError) as exc:
        raise SessionError(f"session parameters must be valid, got: {exc}") from None
    if not isinstance(desc, dict):
        raise SessionError(f"session recording description must be a JSON object, got {str(desc)[:40]!r}")
    ref = RecordingRef(attr(g, "path", str, "recording"), attr(g, "size", int, "recording"),
                       attr(g, "fingerprint", str, "recording"), desc,
                       attr(g, "content_hash", str, "recording") if "content_hash" in g.attrs else "")
    for c, dt in COLUMNS.items():
        array(data, f"events/{c}", np.dtype(dt).str, 1)
    array(data, "events/sigma_uv", "f8", 1)
    ev = fs["events"]
    for a, kind in (("rate_hz", float), ("n_samples", int), ("floor_sigma", float), ("polarity", str)):
        attr(ev, a, kind, "events")
    try:
        events = EventTable.from_h5_group(ev, {k[7:]: v for k, v in data.items() if k.startswith("events/")})
    except RigsideError as exc:
        raise SessionError(f"session {exc}") from None
    values = array(data, "features/values", "f4", 2)
    if not np.isfinite(values).all():
        raise SessionError("session dataset features/values must hold finite numbers, got NaN or infinite values")
    version = attr(f, "format_version", int, "")
    if not (isinstance(names, list) and all(isinstance(n, str) for n in names)):
        raise SessionError("feature names must be a list of text, got other values")
    if len(values) != len(events):
        raise SessionError(f"session arrays must agree in length ({len(events)} events), got features "
                           f"{values.shape}")
    journal = Journal.from_text(text(data, "journal/lines"))
    if version == 1:
        journal = Journal(upgrade_format1_journal(journal.entries))
    sorting_data = SortingData.from_events(events, values, names)
    sorting = Sorting.from_state(sorting_data, _read_state(f, "sorting", data, version, events), journal)
    if FIRST_PASS in fs:
        sorting.origin = Sorting.from_state(sorting_data, _read_state(fs, FIRST_PASS, data, version, events)).state()
    session = Session(ref, params, events, sorting, attr(f, "program_version", str, ""),
                      attr(f, "saved_utc", str, ""), path, unit_numbers=read_table(f, data))
    return ref, session


def _read_state(f: h5py.File, at: str, data: dict, version: int, events: EventTable) -> SortingState:
    """The sorting state stored in group ``at`` of ``f`` (its datasets read and verified in ``data``)."""
    assign = array(data, f"{at}/assignments", "i4", 1)
    ids = array(data, f"{at}/unit_id", "i4", 1)
    groups = array(data, f"{at}/unit_group", "i4", 1)
    labels = read_labels(data, version, at)
    notes = parse_json(text(data, f"{at}/notes"), "session notes", SessionError)
    if not (isinstance(notes, list) and all(isinstance(n, str) for n in notes)):
        raise SessionError("notes must be a list of text, got other values")
    m = len(ids)
    if len(assign) != len(events) or not (len(groups) == len(labels) == len(notes) == m) or len(np.unique(ids)) != m:
        raise SessionError(f"session arrays must agree in length ({len(events)} events, {m} units), got "
                           f"assignments {assign.shape}, unit columns {len(groups)}/{len(labels)}/{len(notes)} "
                           f"with unique ids in {at}")
    if m and not (groups.min() >= 0 and groups.max() < events.n_channels and ids.min() >= 1):
        raise SessionError(f"unit ids must be at least 1 and unit groups from 0 to {events.n_channels - 1}, "
                           f"got ids {int(ids.min())}.. and groups {int(groups.min())}..{int(groups.max())}")
    units = {int(u): Unit(int(gr), la, note) for u, gr, la, note in zip(ids, groups, labels, notes)}
    return SortingState(assign, units, attr(f[at], "next_id", int, at))


def _read(path: Path) -> tuple[RecordingRef, Session]:
    f, data, _, version = _open(path)
    with f:
        if version < 3:
            return _interpret(f, f, data, path)
        static, want = _static_of(f, path)
        fs, static_data, digest, _ = _open(static, STATIC_FORMAT, "session static part")
        with fs:
            if digest != want:
                raise SessionError(f"session static part must be the one its state was saved with (checksum "
                                   f"{want[:16]}...), got {digest[:16]}... in {str(static)!r}")
            ref, session = _interpret(f, fs, {**data, **static_data}, path)
    s = session.sorting
    session.static_cache = (session.events, s.data.features, s.origin, digest)
    return ref, session


def load_session(path: str | Path, recording_path_override: str | Path | None = None,
                 check_recording: bool = True) -> Session:
    """Open a session file, verify it, and check its recording before anything is computed.

    Parameters
    ----------
    path
        Session file.
    recording_path_override
        New location of a moved recording (its size and fingerprint must match).
    check_recording
        Set False to open a session without its recording (e.g. to export spike times).

    Raises
    ------
    SessionError
        Missing, truncated, corrupted, hostile or inconsistent file (the message says which,
        and names the backup when one exists).
    RecordingMoved
        The recording is not at its recorded path (ask for it, then pass the override).
    RecordingChanged
        The file at the recording path is not the one the session was made from.
    """
    path = Path(path)
    try:
        ref, session = _read(path)
    except SessionError as exc:
        raise _with_alternatives(exc, path) from None
    except (OSError, KeyError, ValueError, TypeError, MemoryError, UnicodeDecodeError) as exc:
        raise _with_alternatives(SessionError(f"session file must be a valid rigside session, got "
                                              f"{str(path)!r}: {type(exc).__name__}: {exc}"), path) from None
    if check_recording:
        session.recording = _check_recording(ref, path, recording_path_override)
    return session


def check_recording_content(session: Session, progress: ProgressFn = None, cancel: CancelFn = None) -> None:
    """The full check before computing from a session's recording: hash its whole content and
    compare with the hash stored at detection (sessions without one pass on the quick check).

    Raises
    ------
    RecordingChanged
        The content differs from the file the session was made from.
    """
    stored = session.recording.content_hash
    if not stored:
        return
    found = content_hash(session.recording.path, progress, cancel, like=stored)
    if found != stored:
        raise RecordingChanged(f"recording {session.recording.path!r} must be the file this session was made "
                               f"from (content {stored[:23]}...), got content {found[:23]}... (changed)")


def _with_alternatives(exc: SessionError, path: Path) -> SessionError:
    others = [str(p) for p in (autosave_path(path), backup_path(path)) if p.exists()]
    if not others or isinstance(exc, (RecordingMoved, RecordingChanged)):
        return exc
    return SessionError(f"{exc}; other saved states exist: {', '.join(others)} (use recovery)")
