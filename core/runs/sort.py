"""Headless sorting run: detection, features, first-pass clustering, the overlap pass, session — resumable.

After each long stage the run writes a checkpoint beside the session
(``NAME.checkpoint.h5``: the event table, the features once computed, the parameters, the
recording's quick fingerprint and the hash of its whole content). A resumed run reuses the
stages whose checkpoint matches the same recording (its whole content is hashed again
first) and the same parameters, and starts over otherwise.
"""

from __future__ import annotations

import json
from pathlib import Path

import h5py
import numpy as np

from rigside.core.errors import RigsideError, SessionError
from rigside.core.events import EventTable
from rigside.core.io.atomic import atomic_copy_bytes, atomic_write, check_not_input, free_backup_path, safe_unlink
from rigside.core.io.content import ALGORITHMS, content_hash
from rigside.core.io.h5image import h5_direct
from rigside.core.io.h5safe import read_verified
from rigside.core.io.recording import Recording
from rigside.core.params import Params
from rigside.core.preload import preload
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.quality.stored_numbers import compute_numbers, numbers_to_store, table_rows
from rigside.core.signal.event_pass import detect_with_features
from rigside.core.signal.features import Basis, Features, compute_features, feature_names
from rigside.core.signal.overlaps import recover_overlaps
from rigside.core.textparse import parse_json
from rigside.core.units.first_pass import first_pass
from rigside.core.units.recovered import with_recovered
from rigside.core.units.session import RecordingRef, Session, save_session
from rigside.core.units.sorting import Sorting

STAGE_SHARES = (0.6, 0.15, 0.15, 0.1)
"""Shares of the progress bar: detection, features (one pass with detection), clustering, overlaps."""


def checkpoint_path(session_path: str | Path) -> Path:
    p = Path(session_path)
    return p.with_name(p.name + ".checkpoint.h5")


def _key(recording: Recording, params: Params) -> str:
    """What a checkpoint must match: the recording's fingerprint, channel groups and every parameter."""
    return json.dumps({"fingerprint": recording.fingerprint(), "groups": [g.tolist() for g in recording.groups],
                       "params": params.to_dict()}, sort_keys=True)


def _write_checkpoint(path: Path, key: str, events: EventTable, features: Features | None,
                      content: str | None) -> None:
    """The checkpoint, its arrays written uncompressed straight to the file (no copy of them in memory)."""
    def fill(tmp: Path) -> None:
        with h5_direct(tmp) as (f, store):
            f.attrs["key"] = key
            f.attrs["content_hash"] = content or ""
            events.to_h5_group(f.create_group("events"), store=store)
            if features is not None:
                store(f, "features", features.values)
                f.attrs["feature_names"] = json.dumps(features.names)
                for g, basis in (features.bases or {}).items():   # the overlap pass of a resumed run needs them
                    f.create_dataset(f"bases/{g}/mean", data=basis.mean_)
                    f.create_dataset(f"bases/{g}/components", data=basis.components_)
    atomic_write(path, fill)


def _read_checkpoint(path: Path, key: str, recording: Recording, params: Params,
                     progress: ProgressFn, cancel: CancelFn) -> tuple[EventTable | None, Features | None]:
    """Events and features of a matching checkpoint; (None, None) when absent, unreadable or stale.

    A checkpoint matches when its key (quick fingerprint, groups, parameters) and the hash of the
    recording's whole content (computed here) agree. One that matches but whose content does not
    fit the recording is refused (:class:`RigsideError`), since our own writes never leave one.
    """
    if not path.exists():
        return None, None
    try:
        f = h5py.File(path, "r")
    except OSError:
        return None, None  # not an HDF5 file any more: only costs recomputation
    with f:
        found, stored = f.attrs.get("key"), f.attrs.get("content_hash")
        if not isinstance(found, str) or found != key or not isinstance(stored, str) or \
                not stored.startswith(tuple(ALGORITHMS)):
            return None, None
        recording.content_hash = content_hash(recording.path, progress, cancel, like=stored)
        if recording.content_hash != stored:
            return None, None
        try:
            data, _ = read_verified(f, path)
            events = EventTable.from_h5_group(f["events"])
            _check_fits(events, recording)
            if "features" not in data:
                return events, None
            values = data["features"]
            names = parse_json(str(f.attrs["feature_names"]), "checkpoint feature names")
            expected = feature_names(params.snippets.n_pcs, recording.positions is not None)
            if names != expected or values.dtype != np.float32 \
                    or values.shape != (len(events), len(names)) or not np.isfinite(values).all():
                raise RigsideError(f"features must be finite float32 of shape ({len(events)}, {len(names)}) "
                                   f"named as the parameters say, got {values.dtype} {values.shape}")
            return events, Features(values, names, _bases(data, params.snippets.n_pcs))
        except (RigsideError, OSError, KeyError, ValueError, TypeError) as exc:
            raise RigsideError(f"checkpoint {str(path)!r} must hold this recording's events and features, "
                               f"got {exc}; delete it or run without --resume") from None


def _bases(data: dict[str, np.ndarray], n_pcs: int) -> dict[int, Basis]:
    """The PCA bases stored in a checkpoint (``bases/<group>/mean`` and ``components``), checked."""
    out = {}
    for key in data:
        if key.startswith("bases/") and key.endswith("/mean"):
            g = key.split("/")[1]
            mean, comp = data[key], data.get(f"bases/{g}/components")
            if not g.isdigit() or comp is None or mean.ndim != 1 or comp.ndim != 2 or comp.shape[1] != len(mean) \
                    or not 1 <= len(comp) <= n_pcs or not (np.isfinite(mean).all() and np.isfinite(comp).all()):
                raise RigsideError(f"PCA basis of group {g} must be a finite mean and at most {n_pcs} components "
                                   f"of its length, got other arrays")
            out[int(g)] = Basis(mean, comp)
    return out


def _check_fits(events: EventTable, recording: Recording) -> None:
    if (events.n_samples, events.n_channels, events.rate_hz) != (
            recording.n_samples, recording.n_channels, recording.rate_hz):
        raise RigsideError(f"events must describe {recording.n_samples} samples of {recording.n_channels} "
                           f"channels at {recording.rate_hz:g} Hz, got {events.n_samples} of "
                           f"{events.n_channels} at {events.rate_hz:g} Hz")
    if len(events) and np.any(recording.channel_group[events.channel] != events.group):
        raise RigsideError("event groups must be the recording's channel groups, got other group numbers")


def sort_recording(recording: Recording, params: Params, checkpoint: Path | None = None,
                   resume: bool = False, progress: ProgressFn = None,
                   cancel: CancelFn = None) -> tuple[EventTable, Sorting]:
    """Detect and compute features (one pass, :mod:`rigside.core.signal.event_pass`), then cluster every
    group, in memory.

    Parameters
    ----------
    recording
        The recording (read-only).
    params
        Pipeline parameters (``params.cluster`` for the first pass). The events kept are
        those at the detection threshold, artefacts included (they go to no unit). With
        ``params.overlaps.enabled`` (and no site positions), the spikes hidden by overlaps are
        recovered after the first pass (:mod:`rigside.core.signal.overlaps`, joined by
        :func:`rigside.core.units.recovered.with_recovered`).
    checkpoint
        File to save the events and features in after each long stage (none if ``None``).
    resume
        Reuse the stages saved in a matching ``checkpoint``.
    progress, cancel
        Progress callback and cancel check.

    Returns
    -------
    events, sorting
        The event table and its unreviewed first-pass sorting.
    """
    params.validate(recording.rate_hz)
    key = _key(recording, params) if checkpoint is not None else ""
    a, b, c, _ = STAGE_SHARES
    loading = preload("sklearn.decomposition", "sklearn.cluster")  # PCA fits and k-means, later in the run
    events, features = (None, None)
    if checkpoint is not None and resume:
        events, features = _read_checkpoint(checkpoint, key, recording, params,
                                            lambda f, m: report(progress, a * f, m),
                                            cancel)
    if events is None:
        events, features = detect_with_features(recording, params, cancel=cancel,
                                                progress=lambda f, m: report(progress, (a + b) * f, m))
        if checkpoint is not None:
            _write_checkpoint(checkpoint, key, events, features, recording.content_hash)
    if features is None:  # a checkpoint of an earlier version, holding events only
        features = compute_features(recording, events, params, cancel=cancel,
                                    progress=lambda f, m: report(progress, a + b * f, m))
        if checkpoint is not None:
            _write_checkpoint(checkpoint, key, events, features, recording.content_hash)
    report(progress, a + b, "features ready")
    loading.join()  # before the clustering workers fork
    sorting = first_pass(events, features, params.cluster, cancel=cancel, workers=params.run.workers,
                         progress=lambda f, m: report(progress, a + b + c * f, m))
    if params.overlaps.enabled and recording.positions is None:
        found = recover_overlaps(recording, events, features, sorting.assignments, params, cancel=cancel,
                                 progress=lambda f, m: report(progress, a + b + c + (1 - a - b - c) * f, m))
        events, _, sorting = with_recovered(events, features, sorting, found)
    return events, sorting


def check_new_session(session_path: str | Path, overwrite: bool) -> None:
    """Refuse to replace an existing session (it may hold hand curation) unless ``overwrite``."""
    p = Path(session_path)
    if (p.exists() or p.is_symlink()) and not overwrite:
        raise SessionError(f"session file must not exist yet (it may hold hand curation; give --overwrite "
                           f"to replace it and keep it as a backup), got {str(p)!r}")


def run_sort(recording: Recording, params: Params, session_path: str | Path, resume: bool = False,
             progress: ProgressFn = None, cancel: CancelFn = None,
             overwrite: bool = False) -> tuple[Session, Path | None]:
    """:func:`sort_recording` with a checkpoint beside ``session_path``, then save the session
    atomically and remove the checkpoint.

    An existing session is refused unless ``overwrite``; then it is kept under the first free
    name among ``NAME.bak``, ``NAME.bak.1``, ... (an earlier backup is never replaced).

    Returns
    -------
    session, backup
        The saved session and where the replaced one was kept (``None`` if there was none).
    """
    check_new_session(session_path, overwrite)
    ckpt = checkpoint_path(session_path)
    check_not_input(ckpt, "checkpoint")
    events, sorting = sort_recording(recording, params, ckpt, resume, progress, cancel)
    session = Session(RecordingRef.from_recording(recording), params, events, sorting)
    check(cancel)
    session.unit_numbers = numbers_to_store(session, table_rows(compute_numbers(session)))
    backup = None
    if Path(session_path).exists():
        check_new_session(session_path, overwrite)
        backup = free_backup_path(session_path)
        atomic_copy_bytes(session_path, backup)
    save_session(session_path, session, keep_backup=False)
    safe_unlink(ckpt)
    report(progress, 1.0, "session saved")
    return session, backup
