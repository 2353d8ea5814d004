"""Curation suggestions: unit pairs that may be one neuron, and units that may be two.

:func:`suggest` ranks candidate merges (pairs of units of one channel group) and candidate
splits, each with its evidence (:data:`MERGE_EVIDENCE`, :data:`SPLIT_EVIDENCE`, computed by
:mod:`rigside.core.quality.pair_evidence`) and one score from 0 to 1. The score is the mean of the
evidence parts that are defined, each mapped to [0, 1] (:data:`SCORE_RULE`): a ranking aid for
the curator, not a probability. Cost is bounded: each unit is fitted on at most
``max_fit_events`` events spread over the recording, and only each unit's ``neighbours`` most
overlapping units of its group (Bhattacharyya coefficient of their feature Gaussians) are weighed
as merges. Accepting a suggestion is an existing step (:meth:`Suggestion.operation`), rejecting
it a :class:`~rigside.core.units.dismissals.DismissSuggestion`; rejected suggestions are not
offered again while their units keep their events.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from rigside.core.errors import RigsideError
from rigside.core.events import EventTable
from rigside.core.io.atomic import atomic_write
from rigside.core.params import ClusterParams, MetricParams, Params
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.quality.pair_evidence import (
    bhattacharyya_coefficient,
    continuity,
    gaussian_fit,
    refractory_dip,
    split_test,
    waveform_likeness,
)
from rigside.core.signal.chunk_pool import single_threaded_pools
from rigside.core.signal.snippets import event_snippets, spread_subsample
from rigside.core.units.dismissals import DismissSuggestion, dismissed_keys, members_digest, suggestion_key
from rigside.core.units.operation_base import Operation
from rigside.core.units.operations import MergeUnits, SplitInTwo
from rigside.core.units.refine import OUTLIER_PART
from rigside.core.units.sorting import Sorting

MERGE_EVIDENCE: dict[str, str] = {
    "waveform_similarity": "cosine similarity of the two mean waveforms on the channels where either is large",
    "size_ratio": "smaller over larger norm of the two mean waveforms on those channels [ratio]",
    "channels_compared": "channels in the waveform comparison [count]",
    "refractory_pairs": "cross-correlogram pairs with censored <= |lag| < refractory period [count]",
    "expected_pairs": "pairs chance would put there, from the correlogram's 5-25 ms flanks [count]",
    "refractory_dip": "1 - refractory_pairs / expected_pairs (1: empty, as within one neuron)",
    "dip_p_value": "Poisson probability of at most refractory_pairs when expected_pairs are due",
    "feature_overlap": "Bhattacharyya coefficient of the two units' Gaussians in PC space (0 apart, 1 same)",
    "time_overlap": "overlap of the units' central 80% time spans over the shorter span [fraction]",
    "continuity": "1 - handover / whole-mean Mahalanobis distance: one unit's features carry on the other's",
}
SPLIT_EVIDENCE: dict[str, str] = {
    "delta_bic_per_event": "(BIC of one Gaussian - BIC of two) / events fitted, on all features as the first pass "
                           "fits them; positive favours two parts",
    "part_overlap": "Bhattacharyya coefficient of the two fitted parts (0 apart, 1 same)",
    "misclassification": "the parts' directly estimated misclassification probability (the first pass splits at "
                         "most at merge_overlap)",
    "smaller_part": "share of the unit's events in the smaller part, as accepting splits it [fraction]",
    "second_channel_share": "share of the unit's events detected on its second most frequent channel",
    "own_dip": "refractory_dip of the unit with itself (its autocorrelogram; low: refractory violations)",
    "parts_dip": "refractory_dip between the two fitted parts (low: the parts are not one neuron)",
    "outliers": "events left out of the fits as far from the unit's one Gaussian, when the first fit's smaller "
                "part held under 10% (they are assigned all the same) [events]",
}
SCORE_RULE: dict[str, str] = {
    "waveform_similarity": "(similarity - 0.8) / 0.2",
    "refractory_dip": "dip",
    "feature_overlap": "the larger of overlap and continuity (one part: both say the units share a cluster)",
    "delta_bic_per_event": "1 - 2 x part_overlap when two parts win BIC and the smaller holds at least 10%, else 0",
    "misclassification": "not scored (shown: the first pass's own criterion)",
    "second_channel_share": "2 x share",
    "own_dip": "2 x (1 - dip)",
    "parts_dip": "2 x (1 - dip)",
}
"""How each evidence enters the score (clipped to [0, 1]); the score is the mean of the defined parts."""


@dataclass(frozen=True)
class SuggestParams:
    """Settings of :func:`suggest`."""

    neighbours: int = 4
    max_fit_events: int = 2000
    waveform_events: int = 200
    min_events: int = 30
    min_score: float = 0.25
    top: int | None = None
    baseline_ms: tuple[float, float] = (5.0, 25.0)
    seed: int = 0

    def validate(self) -> None:
        for name in ("neighbours", "max_fit_events", "waveform_events", "min_events"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int) or v < 1:
                raise RigsideError(f"suggestion setting {name} must be an integer of at least 1, got {v!r}")
        if not 0 <= self.min_score <= 1:
            raise RigsideError(f"lowest suggestion score must be from 0 to 1, got {self.min_score!r}")
        if self.top is not None and (isinstance(self.top, bool) or not isinstance(self.top, int) or self.top < 1):
            raise RigsideError(f"number of suggestions must be at least 1, got {self.top!r}")


@dataclass(frozen=True)
class Suggestion:
    """One suggested merge (two units) or split (one unit), its evidence and score."""

    kind: str
    units: tuple[int, ...]
    group: int
    score: float
    evidence: dict[str, float]
    members: str
    notes: tuple[str, ...] = field(default=())
    cluster: ClusterParams | None = field(default=None, compare=False)

    @property
    def key(self) -> str:
        return suggestion_key(self.kind, self.units, self.members)

    @property
    def text(self) -> str:
        if self.kind == "merge":
            return f"Merge units {self.units[0]} and {self.units[1]}"
        return f"Split unit {self.units[0]} in two"

    def operation(self) -> Operation:
        """The step that accepts this suggestion: a merge, or the unit split into the two parts its
        evidence was computed on (:class:`~rigside.core.units.operations.SplitInTwo` with the
        clustering settings the suggestions were made with)."""
        if self.kind == "merge":
            return MergeUnits(list(self.units))
        return SplitInTwo(self.units[0], self.cluster)

    def dismissal(self) -> DismissSuggestion:
        """The step that rejects this suggestion."""
        return DismissSuggestion(self.kind, list(self.units), self.members)


def _part(value: float, lo: float = 0.0, scale: float = 1.0) -> float:
    return math.nan if not math.isfinite(value) else float(np.clip((value - lo) / scale, 0.0, 1.0))


def _score(parts: list[float]) -> float:
    defined = [p for p in parts if math.isfinite(p)]
    return float(np.mean(defined)) if defined else 0.0


def pc_columns(names) -> list[int]:
    """Columns of the principal components (``PC1``, ...) among feature ``names``."""
    cols = [i for i, n in enumerate(names) if str(n).startswith("PC")]
    if not cols:
        raise RigsideError(f"features must hold principal components (PC1, ...), got {', '.join(map(str, names))}")
    return cols


def mean_waveforms(recording, events: EventTable, params: Params, sorting: Sorting, units, n_per_unit: int = 200,
                   progress: ProgressFn = None, cancel: CancelFn = None) -> dict[int, np.ndarray]:
    """Mean filtered waveform (samples x the group's channels, float64) of each unit, from at
    most ``n_per_unit`` of its events spread over the recording."""
    from rigside.core.signal.filtering import BandPass

    bandpass = BandPass(recording, params.filter)
    out = {}
    for i, u in enumerate(units):
        check(cancel)
        report(progress, i / max(1, len(units)), f"mean waveform of unit {u}")
        idx = sorting.events_of(u)
        snips, _ = event_snippets(recording, events, params, idx[spread_subsample(len(idx), n_per_unit)], bandpass,
                                  cancel)
        out[int(u)] = snips.astype(np.float64).mean(axis=0)
    return out


class _Unit:
    """What the suggestions need of one unit: its rows, fitted rows, times and Gaussian."""

    def __init__(self, sorting: Sorting, u: int, cols: list[int], max_fit: int) -> None:
        self.id, self.rows = u, sorting.events_of(u)
        self.fit = self.rows[spread_subsample(len(self.rows), max_fit)]
        self.x = sorting.data.features[self.fit][:, cols].astype(np.float64)
        self.times = sorting.data.time_s[self.rows]
        self.mean, self.cov = gaussian_fit(self.x)


def _merge(a: _Unit, b: _Unit, overlap: float, sorting: Sorting, metric: MetricParams, p: SuggestParams,
           waveforms: dict | None) -> Suggestion:
    lo, hi = (v / 1e3 for v in p.baseline_ms)
    dip = refractory_dip(a.times, b.times, metric.censored_ms / 1e3, metric.refractory_ms / 1e3, (lo, hi))
    cont = continuity(sorting.data.time_s[a.fit], a.x, sorting.data.time_s[b.fit], b.x)
    ev = {"refractory_pairs": float(dip.observed), "expected_pairs": dip.expected, "refractory_dip": dip.dip.value,
          "dip_p_value": dip.p_value, "feature_overlap": overlap, "time_overlap": cont.time_overlap,
          "continuity": cont.continuity.value}
    notes = [r for r in (dip.dip.reason, cont.continuity.reason) if r]
    if waveforms is not None:
        w = waveform_likeness(waveforms[a.id], waveforms[b.id])
        ev.update(waveform_similarity=w.similarity, size_ratio=w.size_ratio, channels_compared=float(len(w.channels)))
    else:
        notes.append("no recording: waveforms not compared")
    score = _score([_part(ev.get("waveform_similarity", math.nan), 0.8, 0.2), _part(dip.dip.value),
                    max(overlap, _part(cont.continuity.value)) if math.isfinite(cont.continuity.value) else overlap])
    units = (a.id, b.id)
    return Suggestion("merge", units, sorting.unit(a.id).group, score, ev, members_digest(sorting, units), tuple(notes))


def _split(unit: _Unit, channels: np.ndarray, sorting: Sorting, metric: MetricParams, p: SuggestParams,
           cluster: ClusterParams) -> Suggestion | None:
    data = sorting.data
    channel = None if data.channel is None else data.channel[unit.rows]
    group = sorting.unit(unit.id).group
    clustered = int(np.sum((data.group == group) & ~data.artefact))
    test = split_test(data.features[unit.rows], channel, cluster, unit.id, clustered)
    if test is None:
        return None
    windows = (metric.censored_ms / 1e3, metric.refractory_ms / 1e3, tuple(v / 1e3 for v in p.baseline_ms))
    own = refractory_dip(unit.times, unit.times, *windows)
    between = refractory_dip(unit.times[test.parts == 0], unit.times[test.parts == 1], *windows)
    counts = np.sort(np.bincount(channels[unit.rows]))[::-1]
    share = float(counts[1] / counts.sum()) if len(counts) > 1 else 0.0
    two = test.delta_bic_per_event > 0 and test.smaller_part >= OUTLIER_PART
    ev = {"delta_bic_per_event": test.delta_bic_per_event, "part_overlap": test.overlap,
          "misclassification": test.misclassification, "smaller_part": test.smaller_part,
          "second_channel_share": share, "own_dip": own.dip.value, "parts_dip": between.dip.value,
          "outliers": float(test.outliers)}
    score = _score([_part(1 - 2 * test.overlap) if two else 0.0, _part(2 * share), _part(2 - 2 * own.dip.value),
                    _part(2 - 2 * between.dip.value)])
    notes = tuple(f"{what}: {r}" for what, r in (("own", own.dip.reason), ("parts", between.dip.reason)) if r)
    return Suggestion("split", (unit.id,), group, score, ev, members_digest(sorting, [unit.id]), notes, cluster)


def suggest(events: EventTable, sorting: Sorting, metric: MetricParams, waveforms: dict[int, np.ndarray] | None = None,
            params: SuggestParams | None = None, progress: ProgressFn = None,
            cancel: CancelFn = None, cluster: ClusterParams | None = None) -> list[Suggestion]:
    """Ranked merge and split suggestions for a sorting, best first.

    Parameters
    ----------
    events
        The sorting's event table (detection channels of the split test).
    sorting
        The sorting; its journal's rejections (:func:`~rigside.core.units.dismissals.dismissed_keys`)
        are left out.
    metric
        Refractory and censored periods (the censored period resolved, see
        :func:`rigside.core.params.metric_settings`).
    waveforms
        Mean waveform of every unit with at least ``params.min_events`` events
        (:func:`mean_waveforms`), or None to compare features only.
    params
        Suggestion settings.
    cluster
        Clustering settings of the split test, the first pass's (default :class:`ClusterParams`);
        accepting a split uses the same.

    Returns
    -------
    list of Suggestion
        Scores of at least ``params.min_score``, at most ``params.top`` of them.
    """
    p = params or SuggestParams()
    p.validate()
    metric.validate()
    cluster = cluster or ClusterParams()
    cluster.validate()
    with single_threaded_pools():      # small matrices: threaded BLAS only costs here (see cluster_features)
        return _suggest(events, sorting, metric, waveforms, p, cluster, progress, cancel)


def _suggest(events: EventTable, sorting: Sorting, metric: MetricParams, waveforms: dict | None, p: SuggestParams,
             cluster: ClusterParams, progress: ProgressFn, cancel: CancelFn) -> list[Suggestion]:
    if len(events) != len(sorting.data):
        raise RigsideError(f"events must be the sorting's ({len(sorting.data)}), got a table of {len(events)}")
    cols = pc_columns(sorting.data.feature_names)
    dismissed = dismissed_keys(sorting.journal.entries)
    counts = sorting.counts()
    by_group: dict[int, list[_Unit]] = {}
    for u in sorting.unit_ids():
        if counts[u] >= p.min_events:
            by_group.setdefault(sorting.unit(u).group, []).append(_Unit(sorting, u, cols, p.max_fit_events))
    out: list[Suggestion] = []
    for done, (group, units) in enumerate(sorted(by_group.items())):
        check(cancel)
        out += [s for s in (_split(unit, events.channel, sorting, metric, p, cluster) for unit in units) if s]
        overlap = np.zeros((len(units), len(units)))
        for i in range(len(units)):
            for j in range(i + 1, len(units)):
                overlap[i, j] = overlap[j, i] = bhattacharyya_coefficient(units[i].mean, units[i].cov,
                                                                          units[j].mean, units[j].cov)
        np.fill_diagonal(overlap, -1.0)
        pairs = {tuple(sorted((i, int(j)))) for i in range(len(units))
                 for j in np.argsort(-overlap[i], kind="stable")[:min(p.neighbours, len(units) - 1)]}
        for i, j in sorted(pairs):
            check(cancel)
            out.append(_merge(units[i], units[j], float(overlap[i, j]), sorting, metric, p, waveforms))
        report(progress, (done + 1) / len(by_group), f"weighed group {group}")
    kept = [s for s in out if s.score >= p.min_score and s.key not in dismissed]
    kept.sort(key=lambda s: (-s.score, s.kind, s.units))
    return kept[:p.top] if p.top is not None else kept


CSV_COLUMNS = ("rank", "kind", "units", "group", "score", *MERGE_EVIDENCE, *SPLIT_EVIDENCE, "notes", "key")


def suggestions_csv_text(suggestions: list[Suggestion]) -> str:
    """The suggestions as CSV text (:data:`CSV_COLUMNS`; evidence that does not apply or is undefined is empty)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    for rank, s in enumerate(suggestions, 1):
        values = [s.evidence.get(c, math.nan) for c in (*MERGE_EVIDENCE, *SPLIT_EVIDENCE)]
        w.writerow([rank, s.kind, " ".join(map(str, s.units)), s.group, f"{s.score:.4f}",
                    *("" if not math.isfinite(v) else f"{v:.6g}" for v in values), "; ".join(s.notes), s.key])
    return buf.getvalue()


def write_suggestions_csv(path: str | Path, suggestions: list[Suggestion]) -> Path:
    """Write :func:`suggestions_csv_text` atomically to ``path``."""
    data = suggestions_csv_text(suggestions).encode("utf-8")
    atomic_write(Path(path), lambda tmp: tmp.write_bytes(data))
    return Path(path)
