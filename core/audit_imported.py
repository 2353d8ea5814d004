"""Imported units seen through the raw data: where each one lives, its waveforms, and the
same quality numbers as curated units.

A unit's main channel is the channel whose mean waveform (over a spread-out subsample of its
spikes, cut at the imported times) reaches the largest extremum of the detection polarity
within the matching tolerance of the spike time; its channel group is that channel's group.
Quality numbers come from :func:`core.unit_table.unit_metrics_for_events` on a combined event
set per group: the imported spikes (on their unit's main channel) plus the re-detected
events no imported unit claims, all with features from one PCA fit
(:func:`core.features.compute_features`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .clustering import NO_UNIT
from .events import EventTable
from .features import compute_features
from .filtering import BandPass
from .params import Params
from .pipeline import thresholds_sigma
from .progress import CancelFn, ProgressFn, check, report
from .recording import Recording
from .snippets import extract_snippets, snippet_times_ms, snippet_window
from .spike_import import SpikeTrains
from .unit_table import MetricParams, unit_metrics_for_events


@dataclass
class WaveformSummary:
    """Mean and SD of a unit's filtered waveforms on its group's channels.

    Attributes
    ----------
    channels
        Recording channel of each column.
    times_ms
        Time of each row relative to the spike time (ms).
    mean, sd
        ``(samples, channels)`` in microvolts.
    n_spikes
        Spikes averaged (a subsample spread over the recording).
    """

    channels: np.ndarray
    times_ms: np.ndarray
    mean: np.ndarray
    sd: np.ndarray
    n_spikes: int


@dataclass
class Placement:
    """Where an imported unit lives: main channel, channel group, and the lag of its waveform
    extremum from the imported times (ms; negative: the extremum comes before the times)."""

    main_channel: int
    group: int
    peak_offset_ms: float
    waveform: WaveformSummary


def spread_subsample(n: int, k: int) -> np.ndarray:
    """Up to ``k`` indices of ``0..n-1`` spread evenly over the range."""
    if n <= k:
        return np.arange(n)
    return np.unique(np.round(np.linspace(0, n - 1, k)).astype(np.int64))


def to_samples(times_s: np.ndarray, rate_hz: float, n_samples: int) -> np.ndarray:
    """Nearest sample of each time, kept inside the recording."""
    return np.clip(np.round(np.asarray(times_s) * rate_hz).astype(np.int64), 0, n_samples - 1)


def extremum(x: np.ndarray, polarity: str, axis: int = 0) -> np.ndarray:
    """Signed extremum along ``axis`` in the detection polarity (largest magnitude for "both")."""
    if polarity == "negative":
        return x.min(axis=axis)
    if polarity == "positive":
        return x.max(axis=axis)
    lo, hi = x.min(axis=axis), x.max(axis=axis)
    return np.where(-lo >= hi, lo, hi)


def summarise(snips: np.ndarray, channels: np.ndarray, times_ms: np.ndarray) -> WaveformSummary:
    """Mean and SD of snippets ``(n, samples, channels)``."""
    if len(snips) == 0:
        nan = np.full(snips.shape[1:], np.nan, dtype=np.float32)
        return WaveformSummary(np.asarray(channels), times_ms, nan, nan, 0)
    s = snips.astype(np.float64)
    return WaveformSummary(np.asarray(channels), times_ms, s.mean(axis=0).astype(np.float32),
                           s.std(axis=0).astype(np.float32), len(snips))


def unit_waveforms(bandpass: BandPass, samples: np.ndarray, channels: np.ndarray, params: Params,
                   n_max: int, cancel: CancelFn = None) -> np.ndarray:
    """Filtered snippets at up to ``n_max`` spread-out spikes of one train (sorted samples)."""
    pick = np.asarray(samples)[spread_subsample(len(samples), n_max)]
    return extract_snippets(bandpass, pick, channels, params.snippets, cancel)


def place_units(recording: Recording, bandpass: BandPass, params: Params, spikes: SpikeTrains,
                tolerance_s: float, n_waveforms: int, progress: ProgressFn = None,
                cancel: CancelFn = None) -> dict[int, Placement]:
    """Main channel, group, peak offset and mean waveform of every imported unit.

    Parameters
    ----------
    recording, bandpass, params
        The raw data, its band-pass and the pipeline parameters (snippet window, polarity).
    spikes
        Imported spike trains (inside the recording).
    tolerance_s
        The extremum is searched within this distance of the spike time.
    n_waveforms
        Spikes per unit cut on every channel (spread over the recording).
    progress, cancel
        Progress callback and cancel check.
    """
    before, _ = snippet_window(params.snippets, recording.rate_hz)
    times_ms = snippet_times_ms(params.snippets, recording.rate_hz)
    w = int(round(tolerance_s * recording.rate_hz))
    lo, hi = max(0, before - w), min(len(times_ms), before + w + 1)
    all_channels = np.arange(recording.n_channels)
    ids, starts = spikes.bounds()
    out: dict[int, Placement] = {}
    for k, u in enumerate(ids):
        check(cancel)
        samples = to_samples(spikes.times_s[starts[k]:starts[k + 1]], recording.rate_hz, recording.n_samples)
        snips = unit_waveforms(bandpass, samples, all_channels, params, n_waveforms, cancel)
        mean = snips.astype(np.float64).mean(axis=0)
        peaks = extremum(mean[lo:hi], params.detect.polarity)
        main = int(np.argmax(np.abs(peaks)))
        seg = mean[lo:hi, main]
        lag = int(np.argmin(seg) if peaks[main] < 0 else np.argmax(seg))
        group = int(recording.channel_group[main])
        chans = recording.groups[group]
        out[int(u)] = Placement(main, group, (lo + lag - before) * 1000.0 / recording.rate_hz,
                                summarise(snips[:, :, chans], chans, times_ms))
        report(progress, (k + 1) / len(ids), f"locating imported unit {u}")
    return out


def metric_thresholds(params: Params, sigma_uv: np.ndarray) -> np.ndarray:
    """Per-channel detection threshold (sigma) for the metrics; dead channels (infinite
    threshold in microvolt mode) get the largest float, as they hold no events."""
    thr = thresholds_sigma(params, sigma_uv)
    return np.where(np.isfinite(thr), thr, np.finfo(np.float64).max)


def imported_quality(recording: Recording, params: Params, spikes: SpikeTrains,
                     placements: dict[int, Placement], events: EventTable, free: np.ndarray,
                     metric_params: MetricParams | None = None, progress: ProgressFn = None,
                     cancel: CancelFn = None) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Quality table of the imported units and the amplitude of every imported spike.

    Parameters
    ----------
    recording, params
        Raw data and pipeline parameters.
    spikes
        Imported trains; ``placements`` from :func:`place_units`.
    events
        Re-detected events (their noise sigma and table context are used).
    free
        Indices of re-detected events no imported unit claims; those in the imported units'
        groups count as events outside every unit for isolation distance and L-ratio.
    metric_params
        Settings of the quality metrics.

    Returns
    -------
    table, amplitude_uv
        Columns of :data:`core.unit_table.COLUMNS`, one row per imported unit (ascending id),
        and the filtered value on the unit's main channel at each imported spike (uV, in
        the order of ``spikes``).
    """
    ids, starts = spikes.bounds()
    counts = np.diff(starts)
    code = np.repeat(np.arange(len(ids)), counts)           # imported ids may be any integer
    main = np.array([placements[int(u)].main_channel for u in ids], dtype=np.int64)
    group = np.array([placements[int(u)].group for u in ids], dtype=np.int64)
    free = np.asarray(free, dtype=np.int64)
    free = free[np.isin(events.group[free], group)]
    n_imp = len(spikes)
    sample = np.concatenate([to_samples(spikes.times_s, recording.rate_hz, recording.n_samples),
                             events.sample[free]])
    channel = np.concatenate([main[code], events.channel[free]])
    grp = np.concatenate([group[code], events.group[free]])
    unit = np.concatenate([code, np.full(len(free), NO_UNIT)])
    order = np.argsort(sample, kind="stable")
    n = len(sample)
    base = dict(rate_hz=recording.rate_hz, n_samples=recording.n_samples, sigma_uv=events.sigma_uv,
                floor_sigma=events.floor_sigma, polarity=events.polarity)
    blank = EventTable(sample[order], channel[order], grp[order], np.zeros(n), np.zeros(n),
                       np.zeros(n, bool), **base)
    feats = compute_features(recording, blank, params, cancel=cancel,
                             progress=lambda f, m: report(progress, 0.7 * f, m))
    amp = feats.column("peak_uv").astype(np.float64)
    sigma = events.sigma_uv[channel[order]]
    amp_sigma = np.where(sigma > 0, np.abs(amp) / np.where(sigma > 0, sigma, 1.0), 0.0)
    table = EventTable(sample[order], channel[order], grp[order], amp, amp_sigma, np.zeros(n, bool), **base)
    rows = unit_metrics_for_events(table, unit[order], feats, metric_thresholds(params, events.sigma_uv),
                                   metric_params, cancel=cancel,
                                   progress=lambda f, m: report(progress, 0.7 + 0.3 * f, m))
    rows["unit"] = ids[rows["unit"]]
    amplitude = np.empty(n_imp)
    inverse = np.empty(n, dtype=np.int64)
    inverse[order] = np.arange(n)
    amplitude[:] = amp[inverse[:n_imp]]
    return rows, amplitude
