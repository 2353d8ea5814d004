"""Ground truth of synthetic recordings: loading it and scoring detections against it."""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rigside.core.errors import RigsideError
from rigside.core.events import EventTable
from rigside.core.quality.matching import match_times

TRUTH_HEADER = "unit,sample,time_s"
"""First line of the ground-truth spike file written by :mod:`rigside.core.synthetic.synth`."""


@dataclass
class Truth:
    """True spikes (sample, unit) and one row per unit (group, peak channel, amplitude...)."""

    sample: np.ndarray
    unit: np.ndarray
    unit_group: dict[int, int]
    unit_peak_channel: dict[int, int]
    unit_peak_uv: dict[int, float]
    unit_kind: dict[int, str]


def load_truth(path: str | Path) -> Truth:
    """Read ``<stem>.truth.csv`` and ``<stem>.truth_units.csv`` written by :mod:`rigside.core.synthetic.synth`."""
    path = Path(path)
    units_path = path.with_name(path.name.replace(".truth.csv", ".truth_units.csv"))
    try:
        with open(path, newline="") as fh:
            header = fh.readline().strip()
            body = fh.read()
        if header != TRUTH_HEADER:
            raise ValueError(f"its first line must be {TRUTH_HEADER!r}, got {header[:60]!r}")
        spikes = (np.loadtxt(io.StringIO(body), delimiter=",", usecols=(0, 1), dtype=np.int64, ndmin=2)
                  if body.strip() else np.zeros((0, 2), np.int64))   # a noise-only recording has no spikes
        with open(units_path, newline="") as fh:
            rows = list(csv.DictReader(fh))
        t = Truth(sample=spikes[:, 1], unit=spikes[:, 0].astype(np.int32),
                  unit_group={int(r["unit"]): int(r["group"]) for r in rows},
                  unit_peak_channel={int(r["unit"]): int(r["peak_channel"]) for r in rows},
                  unit_peak_uv={int(r["unit"]): float(r["peak_uv"]) for r in rows},
                  unit_kind={int(r["unit"]): r["kind"] for r in rows})
    except (OSError, ValueError, KeyError, UnicodeDecodeError) as exc:
        raise RigsideError(f"ground truth must be readable CSV files beside the recording, "
                           f"got {str(path)!r}: {exc}") from None
    if len(t.sample) and np.any(np.diff(t.sample) < 0):
        raise RigsideError(f"ground truth spikes must be sorted by sample, got unsorted rows in {str(path)!r}")
    return t


@dataclass
class Score:
    """Hits, misses and false alarms for each threshold of a curve."""

    thresholds_sigma: np.ndarray
    hits: np.ndarray
    misses: np.ndarray
    false_alarms: np.ndarray


def score_curve(events: EventTable, truth: Truth, thresholds_sigma, tolerance_ms: float = 0.5,
                channels=None, units=None) -> Score:
    """Score detections against ground truth at each threshold.

    Events (non-artefact) and true spikes are matched one-to-one within ``tolerance_ms``,
    group by group (a true spike can only be found in its unit's channel group).

    Parameters
    ----------
    events
        Event table with a floor at or below the lowest threshold scored.
    truth
        Ground truth of the same recording.
    thresholds_sigma
        Thresholds (sigma multiples) to score.
    tolerance_ms
        Matching tolerance.
    channels
        If given, only events on these channels and units whose peak channel is among them; events
        in a group without such a unit are false alarms.
    units
        If given, only these true units count (events of their groups only).
    """
    thr = np.atleast_1d(np.asarray(thresholds_sigma, dtype=np.float64))
    tol = tolerance_ms * events.rate_hz / 1000
    unit_ids = np.array(sorted(truth.unit_group))
    if units is not None:
        unit_ids = np.intersect1d(unit_ids, np.asarray(units))
    if channels is not None:
        chosen = set(np.asarray(channels).tolist())
        unit_ids = np.array([u for u in unit_ids if truth.unit_peak_channel[int(u)] in chosen])
    groups = sorted({truth.unit_group[int(u)] for u in unit_ids})
    ok = ~events.artefact
    if channels is not None:
        ok &= np.isin(events.channel, np.asarray(channels))
    hits, misses, fas = (np.zeros(len(thr), np.int64) for _ in range(3))
    if units is None:   # every group with a chosen true unit or a chosen event (false alarms count everywhere)
        groups = sorted(set(groups) | set(np.unique(events.group[ok]).tolist()))
    for g in groups:
        t_true = truth.sample[np.isin(truth.unit, [u for u in unit_ids if truth.unit_group[int(u)] == g])]
        sel = ok & (events.group == g)
        amp, samp = events.amplitude_sigma[sel], events.sample[sel]
        for i, k in enumerate(thr):
            det = samp[amp >= k]
            n_hit = len(match_times(det, t_true, tol)[0])
            hits[i] += n_hit
            misses[i] += len(t_true) - n_hit
            fas[i] += len(det) - n_hit
    return Score(thr, hits, misses, fas)
