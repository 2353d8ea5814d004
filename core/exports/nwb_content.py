"""What an NWB export holds, computed without pynwb: per-unit spike times, mean waveforms,
quality columns and the provenance row (see :mod:`rigside.core.exports.nwb` for the file).

Spike times are the numbers the CSV export writes (``sample / rate_hz`` rounded to 7 decimals,
:func:`rigside.core.io.csv_text.fixed_values`), so both exports hold the same times exactly.
Mean waveforms are band-passed snippets of up to ``n_waveforms`` events per unit spread over the
recording, on every channel of the unit's group (columns in the group's channel order; groups with
fewer channels than the largest are padded with NaN columns).
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from rigside.core import __version__
from rigside.core.errors import RigsideError
from rigside.core.exports.units import TIME_DECIMALS
from rigside.core.io.csv_text import fixed_values
from rigside.core.params import MetricParams
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.quality.metric_settings import metric_settings
from rigside.core.quality.unit_table import described_columns, sorting_unit_table
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.pipeline import thresholds_sigma
from rigside.core.signal.snippets import event_snippets, snippet_times_ms, spread_subsample
from rigside.core.units.journal import utc_now
from rigside.core.units.sorting import LABELS

N_WAVEFORMS = 500
"""Events per unit averaged into its mean waveform (spread over the recording)."""
LABEL_DESCRIPTION = f"curation label, one of: {', '.join(LABELS)}"
NOTE_DESCRIPTION = "the curator's free-text note on the unit"
PROVENANCE_COLUMNS: dict[str, str] = {
    "program": "program that wrote the units",
    "program_version": "its version",
    "exported_utc": "when the units were written (UTC, ISO 8601)",
    "session_file": "the curation session the units come from",
    "session_saved_utc": "when that session was last saved (UTC)",
    "recording_path": "the recording the session was sorted from",
    "recording_size": "its size in bytes",
    "recording_fingerprint": "its quick fingerprint (size and SHA-256 of three sampled blocks)",
    "recording_content_hash": "XXH3-128 hash of its whole content (older files: SHA-256), computed during "
                              "detection (empty if not computed)",
    "parameters": "every pipeline parameter of the session (JSON: filter, noise, detect, snippets, cluster, "
                  "metrics, run)",
    "metric_settings": "the settings the quality columns were computed with (JSON)",
    "waveform_events": "most events per unit averaged into waveform_mean and waveform_sd",
    "spike_time_rounding": "how spike_times were made from detected samples",
}


@dataclass
class UnitsContent:
    """One NWB units table and its provenance, in rows by unit id.

    Attributes
    ----------
    ids, groups, main_channels
        Unit id, channel group and main channel of each row.
    spike_times
        Seconds, ascending, per row.
    labels, notes
        Curation label and note per row.
    columns
        Quality column name -> values (one per row), as in the metrics CSV (``unit`` is the row id; a probe
        recording's units add the position columns ``x_um``, ``y_um``, ``drift_um_per_min``, ``drift_reason``).
    descriptions
        Column name -> meaning and unit.
    waveform_mean, waveform_sd
        ``(units, samples, channels)`` float32 microvolts (NaN where a group has fewer channels).
    waveform_channels
        Recording channels of each row's waveform columns (its group's channels).
    waveform_times_ms
        Time of each waveform sample relative to the spike.
    provenance
        Column -> one value (see :data:`PROVENANCE_COLUMNS`).
    """

    ids: list[int]
    groups: list[int]
    main_channels: list[int]
    spike_times: list[np.ndarray]
    labels: list[str]
    notes: list[str]
    columns: dict[str, list]
    descriptions: dict[str, str]
    waveform_mean: np.ndarray
    waveform_sd: np.ndarray
    waveform_channels: list[np.ndarray]
    waveform_times_ms: np.ndarray
    provenance: dict[str, object]


def check_recording_matches(session, recording) -> None:
    """Refuse a recording whose samples, channels, rate or groups differ from the session's events."""
    ev = session.events
    want = [list(map(int, g)) for g in session.recording.description.get("groups", [])]
    got = [list(map(int, g)) for g in recording.groups]
    if (recording.n_channels, recording.n_samples, float(recording.rate_hz)) != \
            (ev.n_channels, ev.n_samples, float(ev.rate_hz)) or (want and want != got):
        raise RigsideError(f"recording must be the session's ({ev.n_channels} channels, {ev.n_samples} samples at "
                           f"{ev.rate_hz:g} Hz, its channel groups), got {recording.n_channels} channels, "
                           f"{recording.n_samples} samples at {recording.rate_hz:g} Hz in {str(recording.path)!r}")


def _waveforms(session, recording, ids: list[int], n_waveforms: int, progress: ProgressFn,
               cancel: CancelFn) -> tuple[np.ndarray, np.ndarray, list[np.ndarray]]:
    ev, sorting = session.events, session.sorting
    n_t = len(snippet_times_ms(session.params.snippets, ev.rate_hz))
    width = max((len(g) for g in recording.groups), default=1)
    mean = np.full((len(ids), n_t, width), np.nan, dtype=np.float32)
    sd = np.full_like(mean, np.nan)
    channels = []
    bandpass = BandPass(recording, session.params.filter)
    for row, u in enumerate(ids):
        check(cancel)
        report(progress, 0.6 * row / max(1, len(ids)), f"waveforms of unit {u}")
        idx = sorting.events_of(u)
        idx = idx[spread_subsample(len(idx), n_waveforms)]
        chans = np.asarray(recording.groups[sorting.unit(u).group], dtype=np.int64)
        channels.append(chans)
        if not len(idx):
            continue
        snips, _ = event_snippets(recording, ev, session.params, idx, bandpass=bandpass, cancel=cancel)
        s = snips.astype(np.float64)
        mean[row, :, :len(chans)] = s.mean(axis=0)
        sd[row, :, :len(chans)] = s.std(axis=0)
    return mean, sd, channels


def provenance_row(session, metric_params: MetricParams, n_waveforms: int) -> dict[str, object]:
    """The provenance of an export of ``session`` (see :data:`PROVENANCE_COLUMNS`)."""
    ref = session.recording
    return {"program": "rigside", "program_version": __version__, "exported_utc": utc_now(),
            "session_file": str(Path(session.source).resolve()) if session.source else "",
            "session_saved_utc": session.saved_utc or "", "recording_path": str(ref.path),
            "recording_size": int(ref.size), "recording_fingerprint": ref.fingerprint,
            "recording_content_hash": ref.content_hash or "",
            "parameters": json.dumps(session.params.to_dict(), sort_keys=True),
            "metric_settings": json.dumps(asdict(metric_params), sort_keys=True),
            "waveform_events": int(n_waveforms),
            "spike_time_rounding": f"sample / rate_hz rounded to {TIME_DECIMALS} decimals of a second, the "
                                   f"numbers of the unit_times.csv export"}


def units_content(session, recording, metric_params: MetricParams | None = None, n_waveforms: int = N_WAVEFORMS,
                  progress: ProgressFn = None, cancel: CancelFn = None) -> UnitsContent:
    """Everything the NWB units table of ``session`` holds.

    Parameters
    ----------
    session
        A loaded :class:`rigside.core.units.session.Session`.
    recording
        Its recording, open (mean waveforms are cut from it; checked to match the session).
    metric_params
        Settings of the quality columns (default: the session's, :func:`rigside.core.params.metric_settings`).
    n_waveforms
        Most events per unit averaged into the mean waveform.
    progress, cancel
        Progress callback (0 to 0.8 of the export) and cancel check.
    """
    if not (isinstance(n_waveforms, int) and n_waveforms >= 1):
        raise RigsideError(f"waveform events per unit must be an integer of at least 1, got {n_waveforms!r}")
    check_recording_matches(session, recording)
    ev, sorting = session.events, session.sorting
    mp = metric_params or metric_settings(session.params)
    ids = sorted(sorting.units)
    mean, sd, channels = _waveforms(session, recording, ids, n_waveforms, progress, cancel)
    report(progress, 0.6, "quality numbers")
    table = sorting_unit_table(ev, sorting, thresholds_sigma(session.params, ev.sigma_uv), mp, cancel=cancel)
    rows = {int(u): i for i, u in enumerate(table["unit"])}
    order = [rows[u] for u in ids]
    described = {c: d for c, d in described_columns(table).items() if c != "unit"}
    columns = {c: [table[c][i] for i in order] for c in described}
    times = fixed_values(ev.time_s, TIME_DECIMALS)
    report(progress, 0.8, "units ready")
    return UnitsContent(
        ids=ids, groups=[sorting.unit(u).group for u in ids], main_channels=[int(v) for v in columns["main_channel"]],
        spike_times=[times[sorting.events_of(u)] for u in ids], labels=[sorting.unit(u).label for u in ids],
        notes=[sorting.unit(u).note for u in ids], columns=columns,
        descriptions=described | {"label": LABEL_DESCRIPTION, "note": NOTE_DESCRIPTION},
        waveform_mean=mean, waveform_sd=sd, waveform_channels=channels,
        waveform_times_ms=snippet_times_ms(session.params.snippets, ev.rate_hz),
        provenance=provenance_row(session, mp, n_waveforms))
