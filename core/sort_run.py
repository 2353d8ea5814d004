"""Headless sorting run: detection, features, first-pass clustering, session — resumable.

After each long stage the run writes a checkpoint beside the session
(``NAME.checkpoint.h5``: the event table, the features once computed, the parameters and
the recording's fingerprint). A resumed run reuses the stages whose checkpoint matches
the same recording and the same parameters, and starts over otherwise.
"""

from __future__ import annotations

import json
from pathlib import Path

import h5py
import numpy as np

from .atomic import atomic_write
from .errors import RigsideError
from .events import EventTable
from .features import Features, compute_features, feature_names
from .h5safe import read_verified
from .first_pass import first_pass
from .params import Params
from .pipeline import detect, thresholds_sigma
from .progress import CancelFn, ProgressFn, report
from .recording import Recording
from .session import RecordingRef, Session, save_session
from .sorting import Sorting
from .textparse import parse_json

STAGE_SHARES = (0.45, 0.35, 0.2)  # detection, features, clustering: shares of the progress bar


def checkpoint_path(session_path: str | Path) -> Path:
    p = Path(session_path)
    return p.with_name(p.name + ".checkpoint.h5")


def _key(recording: Recording, params: Params) -> str:
    """What a checkpoint must match: the recording's fingerprint, channel groups and every parameter."""
    return json.dumps({"fingerprint": recording.fingerprint(), "groups": [g.tolist() for g in recording.groups],
                       "params": params.to_dict()}, sort_keys=True)


def _write_checkpoint(path: Path, key: str, events: EventTable, features: Features | None) -> None:
    def write(tmp: Path) -> None:
        with h5py.File(tmp, "w") as f:
            f.attrs["key"] = key
            events.to_h5_group(f.create_group("events"))
            if features is not None:
                f.create_dataset("features", data=features.values)
                f.attrs["feature_names"] = json.dumps(features.names)
    atomic_write(path, write)


def _read_checkpoint(path: Path, key: str, recording: Recording, params: Params
                     ) -> tuple[EventTable | None, Features | None]:
    """Events and features of a matching checkpoint; (None, None) when absent, unreadable or stale.

    A checkpoint that matches but whose content does not fit the recording is refused
    (:class:`RigsideError`), since our own writes never leave one.
    """
    if not path.exists():
        return None, None
    try:
        f = h5py.File(path, "r")
    except OSError:
        return None, None  # not an HDF5 file any more: only costs recomputation
    with f:
        found = f.attrs.get("key")
        if not isinstance(found, str) or found != key:
            return None, None
        try:
            data, _ = read_verified(f, path)
            events = EventTable.from_h5_group(f["events"])
            _check_fits(events, recording)
            if "features" not in data:
                return events, None
            values = data["features"]
            names = parse_json(str(f.attrs["feature_names"]), "checkpoint feature names")
            if names != feature_names(params.snippets.n_pcs) or values.dtype != np.float32 \
                    or values.shape != (len(events), len(names)) or not np.isfinite(values).all():
                raise RigsideError(f"features must be finite float32 of shape ({len(events)}, {len(names)}) "
                                   f"named as the parameters say, got {values.dtype} {values.shape}")
            return events, Features(values, names)
        except (RigsideError, OSError, KeyError, ValueError, TypeError) as exc:
            raise RigsideError(f"checkpoint {str(path)!r} must hold this recording's events and features, "
                               f"got {exc}; delete it or run without --resume") from None


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
    """Detect, compute features and cluster every group, in memory.

    Parameters
    ----------
    recording
        The recording (read-only).
    params
        Pipeline parameters (``params.cluster`` for the first pass). The events kept are
        those at the detection threshold, artefacts included (they go to no unit).
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
    events, features = _read_checkpoint(checkpoint, key, recording, params) if checkpoint is not None and resume else (None, None)
    a, b, _ = STAGE_SHARES
    if events is None:
        table = detect(recording, params, progress=lambda f, m: report(progress, a * f, m), cancel=cancel)
        events = table.subset(table.mask(threshold_sigma=thresholds_sigma(params, table.sigma_uv),
                                         include_artefacts=True))
        if checkpoint is not None:
            _write_checkpoint(checkpoint, key, events, None)
    report(progress, a, "events ready")
    if features is None:
        features = compute_features(recording, events, params, cancel=cancel,
                                    progress=lambda f, m: report(progress, a + b * f, m))
        if checkpoint is not None:
            _write_checkpoint(checkpoint, key, events, features)
    report(progress, a + b, "features ready")
    sorting = first_pass(events, features, params.cluster, cancel=cancel,
                         progress=lambda f, m: report(progress, a + b + (1 - a - b) * f, m))
    return events, sorting


def run_sort(recording: Recording, params: Params, session_path: str | Path, resume: bool = False,
             progress: ProgressFn = None, cancel: CancelFn = None) -> Session:
    """:func:`sort_recording` with a checkpoint beside ``session_path``, then save the session
    (atomically; the previous file is kept as a backup) and remove the checkpoint."""
    ckpt = checkpoint_path(session_path)
    events, sorting = sort_recording(recording, params, ckpt, resume, progress, cancel)
    session = Session(RecordingRef.from_recording(recording), params, events, sorting)
    save_session(session_path, session)
    ckpt.unlink(missing_ok=True)
    report(progress, 1.0, "session saved")
    return session
