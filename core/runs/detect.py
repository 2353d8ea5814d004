"""One detection run with its outputs: the event file and the JSON summary."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rigside.core import __version__
from rigside.core.events import EventTable
from rigside.core.io.atomic import atomic_write
from rigside.core.io.recording import Recording
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn, report
from rigside.core.signal.noise import NoiseEstimate, estimate_noise, exclusion_notes, groups_without_usable_channel
from rigside.core.signal.pipeline import NOISE_SHARE, detect, thresholds_sigma


@dataclass(frozen=True)
class DetectOutput:
    """What a detection run wrote: the events, and the artefacts at the threshold left out."""

    events: EventTable
    artefacts_left_out: int


def detect_to_files(recording: Recording, params: Params, out: str | Path, summary: str | Path | None = None,
                    keep_artefacts: bool = False, progress: ProgressFn = None,
                    cancel: CancelFn = None) -> DetectOutput:
    """Detect events and write those at the threshold to ``out`` (.csv or .h5), and a summary.

    Parameters
    ----------
    recording, params
        What to detect on, and how.
    out
        Event file; CSV for a ``.csv`` suffix, HDF5 otherwise.
    summary
        JSON summary to write (parameters, duration, rate, per-channel noise, threshold, counts).
    keep_artefacts
        Also write events flagged as artefacts.
    progress, cancel
        Progress callback and cancel check.

    Returns
    -------
    DetectOutput
        The events written and how many artefact events at the threshold were left out
        (0 with ``keep_artefacts``).
    """
    params.validate(recording.rate_hz)
    noise = estimate_noise(recording, params, cancel=cancel, progress=lambda f, m: report(progress, f * NOISE_SHARE, m))
    events = detect(recording, params, progress=progress, cancel=cancel, noise=noise)
    thr = thresholds_sigma(params, events.sigma_uv)
    at_threshold = events.mask(threshold_sigma=thr, include_artefacts=True)
    chosen = events.subset(events.mask(threshold_sigma=thr, include_artefacts=keep_artefacts))
    if Path(out).suffix.lower() == ".csv":
        chosen.write_csv(out)
    else:
        chosen.write_h5(out)
    if summary is not None:
        write_summary(Path(summary), recording, params, events, noise)
    return DetectOutput(chosen, int(at_threshold.sum()) - len(chosen))


def write_summary(path: Path, rec: Recording, params: Params, events: EventTable, noise: NoiseEstimate) -> None:
    """JSON summary: parameters, duration, rate and per-channel noise, threshold and counts."""
    thr = thresholds_sigma(params, events.sigma_uv)
    counts = events.counts(threshold_sigma=thr)
    doc = {
        "program": "rigside", "version": __version__, "recording": rec.describe(),
        "content_hash": rec.content_hash, "parameters": params.to_dict(), "duration_s": rec.duration_s,
        "rate_hz": rec.rate_hz,
        "artefact_events": int((events.artefact & events.mask(threshold_sigma=thr, include_artefacts=True)).sum()),
        "channels": [{"channel": c, "group": int(rec.channel_group[c]), "noise_uv": float(events.sigma_uv[c]),
                      "threshold_uv": (float(thr[c] * events.sigma_uv[c])
                                       if np.isfinite(thr[c]) and events.sigma_uv[c] > 0 else None),
                      "events": int(counts[c]), "rate_hz": float(counts[c] / rec.duration_s),
                      "flag": noise.bad.get(c), "excluded": c in events.excluded}
                     for c in range(rec.n_channels)],
        "excluded_channels": [{"channel": c, "flag": r} for c, r in sorted(events.excluded.items())],
        "skipped_groups": [{"group": gi, "name": rec.group_names[gi], "note": "no usable channel"}
                           for gi in groups_without_usable_channel(rec.groups, events.excluded)],
        "notes": exclusion_notes(rec.groups, rec.group_names, events.excluded),
    }
    atomic_write(path, lambda tmp: tmp.write_text(json.dumps(doc, indent=2), encoding="utf-8", newline="\n"))
