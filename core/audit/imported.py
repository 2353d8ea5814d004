"""Imported units seen through the raw data: where each one lives and its waveforms.

A unit's main channel is the channel whose mean waveform (over a spread-out subsample of its
spikes, cut at the imported times) reaches the largest extremum of the detection polarity
within the matching tolerance of the spike time; its channel group is that channel's group.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rigside.core.io.recording import Recording
from rigside.core.io.spike_import import SpikeTrains
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.snippets import extract_snippets, snippet_times_ms, snippet_window, spread_subsample

BATCH_VALUES = 25_000_000
"""Most snippet values (float32) held at once while placing units (100 MB)."""


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


def _place(snips: np.ndarray, recording: Recording, polarity: str, lo: int, hi: int, before: int,
           times_ms: np.ndarray) -> Placement:
    mean = snips.astype(np.float64).mean(axis=0)
    peaks = extremum(mean[lo:hi], polarity)
    main = int(np.argmax(np.abs(peaks)))
    seg = mean[lo:hi, main]
    lag = int(np.argmin(seg) if peaks[main] < 0 else np.argmax(seg))
    group = int(recording.channel_group[main])
    chans = recording.groups[group]
    return Placement(main, group, (lo + lag - before) * 1000.0 / recording.rate_hz,
                     summarise(snips[:, :, chans], chans, times_ms))


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
    ids, starts = spikes.bounds()
    # the subsample of every unit, cut on all channels in batches of bounded memory (spans of
    # nearby spikes of different units are then filtered once)
    picks = [starts[k] + spread_subsample(starts[k + 1] - starts[k], n_waveforms) for k in range(len(ids))]
    per_batch = max(1, BATCH_VALUES // (len(times_ms) * recording.n_channels * n_waveforms))
    out: dict[int, Placement] = {}
    for b0 in range(0, len(ids), per_batch):
        check(cancel)
        rows = np.concatenate(picks[b0:b0 + per_batch])
        samples = to_samples(spikes.times_s[rows], recording.rate_hz, recording.n_samples)
        order = np.argsort(samples, kind="stable")
        snips = np.empty((len(rows), len(times_ms), recording.n_channels), dtype=np.float32)
        snips[order] = extract_snippets(bandpass, samples[order], np.arange(recording.n_channels),
                                        params.snippets, cancel)
        at = 0
        for k in range(b0, min(b0 + per_batch, len(ids))):
            mine = snips[at:at + len(picks[k])]
            at += len(picks[k])
            out[int(ids[k])] = _place(mine, recording, params.detect.polarity, lo, hi, before, times_ms)
        report(progress, min(b0 + per_batch, len(ids)) / len(ids), "locating imported units")
    return out
