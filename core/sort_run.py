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
from .h5image import write_h5
from .features import Features, compute_features
from .first_pass import first_pass
from .params import Params
from .pipeline import detect, thresholds_sigma
from .progress import CancelFn, ProgressFn, report
from .recording import Recording
from .session import RecordingRef, Session, save_session
from .sorting import Sorting

STAGE_SHARES = (0.45, 0.35, 0.2)  # detection, features, clustering: shares of the progress bar


def checkpoint_path(session_path: str | Path) -> Path:
    p = Path(session_path)
    return p.with_name(p.name + ".checkpoint.h5")


def _key(recording: Recording, params: Params) -> str:
    """What a checkpoint must match: the recording's fingerprint and every parameter."""
    return json.dumps({"fingerprint": recording.fingerprint(), "params": params.to_dict()}, sort_keys=True)


def _write_checkpoint(path: Path, key: str, events: EventTable, features: Features | None) -> None:
    def fill(f: h5py.File) -> None:
        f.attrs["key"] = key
        events.to_h5_group(f.create_group("events"))
        if features is not None:
            f.create_dataset("features", data=features.values)
            f.attrs["feature_names"] = json.dumps(features.names)
    atomic_write(path, lambda tmp: write_h5(tmp, fill))


def _read_checkpoint(path: Path, key: str) -> tuple[EventTable | None, Features | None]:
    """Events and features of a matching checkpoint; (None, None) when absent or stale."""
    if not path.exists():
        return None, None
    try:
        with h5py.File(path, "r") as f:
            if f.attrs.get("key") != key:
                return None, None
            events = EventTable.from_h5_group(f["events"])
            features = None
            if "features" in f:
                values = np.asarray(f["features"][()], dtype=np.float32)
                names = json.loads(f.attrs["feature_names"])
                if values.shape != (len(events), len(names)):
                    return events, None
                features = Features(values, names)
            return events, features
    except (OSError, KeyError, ValueError, RigsideError):
        return None, None  # a damaged checkpoint only costs recomputation


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
    events, features = _read_checkpoint(checkpoint, key) if checkpoint is not None and resume else (None, None)
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
