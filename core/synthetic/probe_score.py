"""Scoring detections on a probe against ground truth: events and true spikes are paired in time
and space (:func:`score_probe`), which also finds spikes counted twice."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rigside.core.events import EventTable


@dataclass
class ProbeScore:
    """One-to-one matching of events to true spikes on a probe.

    ``event_unit`` is the true unit each event was matched to (-1: none); ``spike_found`` marks the
    true spikes matched; ``duplicate`` the unmatched events that lie within the tolerance and radius
    of a true spike (one spike counted twice).
    """

    event_unit: np.ndarray
    spike_found: np.ndarray
    duplicate: np.ndarray

    def recall(self, unit_of_spike: np.ndarray, unit: int) -> float:
        """Share of a unit's true spikes that were found."""
        mine = unit_of_spike == unit
        return float(self.spike_found[mine].mean()) if mine.any() else float("nan")

    @property
    def precision(self) -> float:
        """Share of the scored events matched to a true spike."""
        return float((self.event_unit >= 0).mean()) if len(self.event_unit) else float("nan")


def score_probe(events: EventTable, site_positions: np.ndarray, true_sample: np.ndarray, true_unit: np.ndarray,
                true_xy: np.ndarray, radius_um: float = 50.0, tolerance_ms: float = 0.5) -> ProbeScore:
    """Match events to true spikes one to one: a pair is an event within ``tolerance_ms`` of a spike
    whose peak site lies within ``radius_um`` of the unit's position at that time; pairs are taken
    closest in time first (then closest in space).

    Parameters
    ----------
    events
        The events to score (already cut at a threshold, artefacts left out by the caller).
    site_positions
        ``(channels, 2)`` site positions (um).
    true_sample, true_unit, true_xy
        Every true spike: sample (sorted), unit and the unit's ``(x_um, y_um)`` at that sample.
    radius_um, tolerance_ms
        Largest distance and time difference of a pair.
    """
    tol = tolerance_ms * events.rate_hz / 1000
    lo = np.searchsorted(true_sample, events.sample - tol, side="left")
    hi = np.searchsorted(true_sample, events.sample + tol, side="right")
    ev = np.repeat(np.arange(len(events)), hi - lo)
    sp = np.concatenate([np.arange(a, b) for a, b in zip(lo, hi)]) if len(events) else np.empty(0, np.int64)
    sp = sp.astype(np.int64)
    dist = np.hypot(*(site_positions[events.channel[ev]] - true_xy[sp]).T) if len(ev) else np.empty(0)
    near = dist <= radius_um
    ev, sp, dist = ev[near], sp[near], dist[near]
    dt = np.abs(events.sample[ev] - true_sample[sp])
    event_unit = np.full(len(events), -1, np.int64)
    found = np.zeros(len(true_sample), bool)
    for k in np.lexsort((dist, dt)):
        e, s = ev[k], sp[k]
        if event_unit[e] < 0 and not found[s]:
            event_unit[e] = true_unit[s]
            found[s] = True
    duplicate = np.zeros(len(events), bool)
    duplicate[ev] = True
    duplicate &= event_unit < 0
    return ProbeScore(event_unit, found, duplicate)
