"""The detection trade-off on a recording with ground truth: misses against false alarms as the
threshold moves, the noise-only rate expected at each threshold, and where each true unit starts
to be missed.

Counts come from the stored event table (threshold-independent events, so every threshold above
the floor is a look-up) and from :func:`rigside.core.synthetic.truth.score_curve`. The expected
noise-only rate is the sampled-data form of Rice's formula (Rice 1944/45) for the filter used,
:func:`rigside.core.signal.rice.sampled_crossing_rate`, summed over the live channels.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rigside.core.events import EventTable
from rigside.core.io.atomic import atomic_write
from rigside.core.quality.matching import match_times
from rigside.core.quality.metrics import missed_fraction
from rigside.core.signal.rice import sampled_crossing_rate
from rigside.core.synthetic.truth import Truth, score_curve

MISS_ONSET_FRACTION = 0.05
"""A unit "starts to be missed" at the threshold where this share of its spikes falls below it."""
STEP_SIGMA = 0.25
"""Spacing of the practice curve's thresholds (noise sigma)."""
SPAN_SIGMA = 9.0
TOLERANCE_MS = 0.5
CSV_COLUMNS = ("threshold_sigma", "events_per_s", "hits", "misses", "false_alarms", "expected_noise_per_s",
               "miss_fraction", "false_alarms_per_s")


@dataclass
class Tradeoff:
    """Counts at each threshold for a set of channels (usually one channel group)."""

    thresholds_sigma: np.ndarray
    events_per_s: np.ndarray
    hits: np.ndarray
    misses: np.ndarray
    false_alarms: np.ndarray
    expected_noise_per_s: np.ndarray
    duration_s: float
    channels: np.ndarray

    @property
    def miss_fraction(self) -> np.ndarray:
        """Misses over true spikes (NaN without true spikes)."""
        total = self.hits + self.misses
        return np.where(total > 0, self.misses / np.maximum(total, 1), np.nan)

    @property
    def false_alarms_per_s(self) -> np.ndarray:
        return self.false_alarms / self.duration_s

    def nearest(self, threshold_sigma: float) -> int:
        """Index of the point nearest a threshold."""
        return int(np.argmin(np.abs(self.thresholds_sigma - float(threshold_sigma))))


def expected_noise_rate(events: EventTable, sos: np.ndarray, channels, thresholds_sigma) -> np.ndarray:
    """Noise-only events per second on ``channels`` at each threshold: the sampled-data crossing
    rate per channel times the live channels (doubled when both polarities are detected)."""
    chans = np.asarray(channels, dtype=np.int64)
    sigma = events.sigma_uv[chans]
    live = int(np.sum(np.isfinite(sigma) & (sigma > 0) & ~np.isin(chans, list(events.excluded))))
    per_channel = np.atleast_1d(sampled_crossing_rate(sos, events.rate_hz, np.asarray(thresholds_sigma, float)))
    return per_channel * live * (2.0 if events.polarity == "both" else 1.0)


def tradeoff_curve(events: EventTable, truth: Truth, thresholds_sigma, channels, sos: np.ndarray,
                   tolerance_ms: float = 0.5) -> Tradeoff:
    """Events, hits, misses, false alarms and the expected noise-only rate at each threshold.

    Parameters
    ----------
    events
        Event table whose floor is at or below the lowest threshold.
    truth
        Ground truth of the same recording.
    thresholds_sigma
        Thresholds (sigma multiples); they are compared in float32 like the table's look-ups.
    channels
        The channels shown (a channel group): their non-artefact events, and the true units whose
        peak channel is among them; events in a group without such a unit are false alarms.
    sos
        The band-pass the events were detected through (for the expected noise rate).
    tolerance_ms
        Largest distance between a true spike and the event that finds it.

    Returns
    -------
    Tradeoff
        ``hits + false_alarms`` equals the events counted, at every threshold.
    """
    chans = np.asarray(channels, dtype=np.int64)
    k = np.asarray(thresholds_sigma, dtype=np.float32).astype(np.float64)
    counts = np.zeros(len(k), np.int64)
    for c in chans:
        counts += events.count_curve(int(c), k)
    duration = events.n_samples / events.rate_hz
    score = score_curve(events, truth, k, tolerance_ms=tolerance_ms, channels=chans)
    return Tradeoff(k, counts / duration, score.hits, score.misses, score.false_alarms,
                    expected_noise_rate(events, sos, chans, k), duration, chans)


@dataclass
class MissOnset:
    """Where one true unit starts to be missed, from the fitted distribution of its amplitudes."""

    unit: int
    n_spikes: int
    mean_sigma: float       # fitted mean amplitude (noise sigma)
    sd_sigma: float         # fitted spread: the unit's own variability and the noise together
    onset_sigma: float      # threshold at which MISS_ONSET_FRACTION of its spikes are missed
    reason: str = ""        # why there is no estimate (NaN values)

    def missed_at(self, threshold_sigma) -> np.ndarray:
        """Predicted missed share of this unit's spikes at a threshold."""
        from scipy.special import ndtr  # imported on use: scipy is not loaded at start-up
        return ndtr((np.asarray(threshold_sigma, float) - self.mean_sigma) / self.sd_sigma)


def miss_onsets(events: EventTable, truth: Truth, channels, tolerance_ms: float = 0.5) -> list[MissOnset]:
    """For each true unit whose peak channel is among ``channels``: the threshold at which it
    starts to be missed.

    The unit's events at the table's floor (those matched to its true spikes within
    ``tolerance_ms``) give its amplitude distribution in noise sigma, which already holds the
    noise added to each spike. A Gaussian cut at the floor is fitted to it by maximum
    likelihood (:func:`rigside.core.quality.metrics.missed_fraction`, after Hill et al. 2011);
    the onset is the threshold below which :data:`MISS_ONSET_FRACTION` of that Gaussian lies.
    """
    chans = np.asarray(channels, dtype=np.int64)
    chosen = set(chans.tolist())
    unit_ids = [u for u in sorted(truth.unit_group) if truth.unit_peak_channel[u] in chosen]
    ok = ~events.artefact
    out = []
    tol = tolerance_ms * events.rate_hz / 1000
    for g in sorted({truth.unit_group[u] for u in unit_ids}):
        in_group = [u for u in truth.unit_group if truth.unit_group[u] == g]
        true_sel = np.isin(truth.unit, in_group)
        t_true, u_true = truth.sample[true_sel], truth.unit[true_sel]
        sel = ok & (events.group == g)
        ia, ib = match_times(events.sample[sel], t_true, tol)
        amps = events.amplitude_sigma[sel][ia]
        for u in (u for u in unit_ids if truth.unit_group[u] == g):
            from scipy.special import ndtri  # imported on use: scipy is not loaded at start-up
            mine = amps[u_true[ib] == u]
            fit = missed_fraction(mine, events.floor_sigma)
            onset = fit.mean + fit.sd * float(ndtri(MISS_ONSET_FRACTION))
            out.append(MissOnset(u, int(np.sum(u_true == u)), fit.mean, fit.sd, onset, fit.reason))
    return out


def practice_tradeoff(events: EventTable, truth: Truth, channels, sos: np.ndarray, progress=None,
                      cancel=None) -> tuple[Tradeoff, list[MissOnset]]:
    """The curve from the events' floor up in :data:`STEP_SIGMA` steps, at least :data:`SPAN_SIGMA`
    and past every unit's fitted mean amplitude (at most 40 sigma), with the units' miss onsets.

    ``progress`` and ``cancel`` are accepted for the window's job runner (the work is short).
    """
    onsets = miss_onsets(events, truth, channels, TOLERANCE_MS)
    means = [o.mean_sigma for o in onsets if np.isfinite(o.mean_sigma)]
    floor = events.floor_sigma
    top = min(max([floor + SPAN_SIGMA] + [m + 1.5 for m in means]), 40.0)
    grid = floor + STEP_SIGMA * np.arange(int(np.ceil((top - floor) / STEP_SIGMA)) + 1)
    return tradeoff_curve(events, truth, grid, channels, sos, TOLERANCE_MS), onsets


def write_tradeoff_csv(path: str | Path, curve: Tradeoff) -> Path:
    """Write the curve as CSV (one row per threshold, :data:`CSV_COLUMNS`), atomically."""
    columns = [curve.thresholds_sigma, curve.events_per_s, curve.hits, curve.misses, curve.false_alarms,
               curve.expected_noise_per_s, curve.miss_fraction, curve.false_alarms_per_s]
    formats = ("{:.4f}", "{:.6g}", "{:d}", "{:d}", "{:d}", "{:.6g}", "{:.6f}", "{:.6g}")

    def cell(fmt: str, v) -> str:
        if fmt == "{:d}":
            return fmt.format(int(v))
        return "" if not math.isfinite(float(v)) else fmt.format(float(v))

    def write(tmp: Path) -> None:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh, lineterminator="\n")
            w.writerow(CSV_COLUMNS)
            for row in zip(*columns):
                w.writerow([cell(f, v) for f, v in zip(formats, row)])
    return atomic_write(Path(path), write)
