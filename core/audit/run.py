"""Auditing an earlier sorting against a fresh look at the same raw data.

For every imported unit: where it lives (:mod:`rigside.core.audit.imported`), the share of its spikes
that a re-detected event supports (same channel group, within the tolerance), its overlap
(Jaccard) with every fresh unit (:func:`rigside.core.quality.matching.shared_spike_matrix`, Jaccard 1912), its
closest fresh unit (highest overlap) and two estimates against that unit:

- false-positive estimate = 1 - shared / n_imported: spikes the matched fresh unit does not
  hold (they may be noise, or spikes of other neurons);
- miss estimate = 1 - shared / n_fresh: spikes of the matched fresh unit the imported unit
  lacks.

Both are estimates: the fresh units have errors of their own (missed low spikes, overlaps,
their own contamination), so an audit bounds disagreement, not the truth.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from rigside.core.audit.imported import Placement, WaveformSummary, place_units, summarise, unit_waveforms
from rigside.core.audit.quality import SEPARATION_EVENTS, imported_quality, metric_thresholds
from rigside.core.audit.table import audit_rows
from rigside.core.errors import ParamError, RigsideError
from rigside.core.events import EventTable
from rigside.core.io.recording import Recording
from rigside.core.io.spike_import import SpikeTrains
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.quality.matching import jaccard, match_times, shared_spike_matrix
from rigside.core.quality.metric_inputs import positive
from rigside.core.quality.metric_settings import metric_settings
from rigside.core.quality.unit_table import unit_metrics_for_events
from rigside.core.runs.sort import sort_recording
from rigside.core.signal.features import Features
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.pipeline import thresholds_sigma
from rigside.core.signal.snippets import snippet_times_ms
from rigside.core.units.clustering import ClusterParams
from rigside.core.units.sorting import NO_UNIT, Sorting

CAUTION = ("Both the false-positive and the miss estimates are measured against freshly sorted units, "
           "which make errors of their own; they estimate disagreement, not ground truth.")


@dataclass
class AuditSettings:
    """Settings of an audit.

    Attributes
    ----------
    tolerance_ms
        Largest distance between matched spikes (default 0.5 ms).
    waveform_spikes
        Spikes per unit cut on every channel to place it and draw its mean waveform.
    spread_share
        A fresh unit holding at least this share of an imported unit's spikes is listed in
        ``spread_over`` (two or more such units suggest a merge).
    weak_overlap
        A closest fresh unit overlapping less than this (Jaccard) is noted as weak.
    separation_events
        Most events per channel group for isolation distance and L-ratio; beyond it they come
        from evenly spread time windows (see :mod:`rigside.core.audit.quality`).

    The quality metrics use the ``metrics`` section of the fresh units' parameters.
    """

    tolerance_ms: float = 0.5
    waveform_spikes: int = 64
    spread_share: float = 0.1
    weak_overlap: float = 0.5
    separation_events: int = SEPARATION_EVENTS

    def validate(self) -> None:
        """Raise :class:`~rigside.core.errors.ParamError` for an out-of-range setting."""
        positive("matching tolerance", self.tolerance_ms, unit="ms")
        if self.tolerance_ms > 5:
            raise ParamError(f"matching tolerance must be at most 5 ms, got {self.tolerance_ms:g} ms")
        if not isinstance(self.waveform_spikes, int) or not 1 <= self.waveform_spikes <= 10000:
            raise ParamError(f"waveform spike count must be an integer from 1 to 10000, got {self.waveform_spikes!r}")
        if not isinstance(self.separation_events, int) or self.separation_events < 100:
            raise ParamError(f"separation event count must be an integer of at least 100, got "
                             f"{self.separation_events!r}")
        for name, v in (("spread share", self.spread_share), ("weak overlap", self.weak_overlap)):
            if not (isinstance(v, (int, float)) and 0 < v <= 1):
                raise ParamError(f"{name} must be a number in (0, 1], got {v!r}")


@dataclass
class FreshUnits:
    """The units an audit compares with: events, their sorting and the parameters used."""

    events: EventTable
    sorting: Sorting
    params: Params
    source: str

    @classmethod
    def from_session(cls, session) -> "FreshUnits":
        """The curated units of a loaded :class:`rigside.core.units.session.Session`."""
        return cls(session.events, session.sorting, session.params,
                   f"session {session.source.name if session.source else '(unsaved)'}")

    def train(self, unit: int) -> tuple[np.ndarray, np.ndarray]:
        """Times (s) and amplitudes (uV) of one fresh unit's events."""
        idx = self.sorting.events_of(unit)
        return self.events.time_s[idx], self.events.amplitude_uv[idx].astype(np.float64)


def first_pass_units(recording: Recording, params: Params, cluster_params: ClusterParams | None = None,
                     progress: ProgressFn = None, cancel: CancelFn = None) -> FreshUnits:
    """Fresh units without a session: detect, compute features and cluster every group.

    The same events as ``rigside sort`` keeps (at the detection threshold, artefacts in no
    unit); the sorting is the unreviewed first pass of :func:`rigside.core.units.first_pass.first_pass`.
    Nothing is written.
    """
    if cluster_params is not None:
        params = replace(params, cluster=cluster_params)
    events, sorting = sort_recording(recording, params, progress=progress, cancel=cancel)
    return FreshUnits(events, sorting, params, "first-pass clustering of re-detected events")


@dataclass
class AuditResult:
    """Everything an audit found (the GUI audit view and the report read it).

    Attributes
    ----------
    spikes, fresh, settings
        The inputs.
    imported_ids, fresh_ids
        Unit ids of the rows and columns of ``matches`` and ``overlap``.
    matches, overlap
        Shared spikes and overlap (Jaccard), imported x fresh.
    table
        One row per imported unit (ascending id, natural order of names): the audit columns and
        the quality numbers (see :data:`rigside.core.audit.table.AUDIT_COLUMNS`); its ``unit``
        column holds the ids as the file gives them (names, for named units).
    fresh_table
        Quality numbers of the fresh units that are some imported unit's closest fresh unit.
    placements
        Main channel, group, peak offset and mean waveform of each imported unit.
    fresh_waveforms
        Mean waveforms of the closest fresh units.
    imported_amplitude_uv
        Filtered value on the unit's main channel at each imported spike (order of ``spikes``).
    """

    spikes: SpikeTrains
    fresh: FreshUnits
    settings: AuditSettings
    imported_ids: np.ndarray
    fresh_ids: np.ndarray
    matches: np.ndarray
    overlap: np.ndarray
    table: dict[str, np.ndarray]
    fresh_table: dict[str, np.ndarray]
    placements: dict[int, Placement]
    fresh_waveforms: dict[int, WaveformSummary]
    imported_amplitude_uv: np.ndarray

    def unit_name(self, unit: int) -> str:
        """An imported unit as the file gives it (its name, or its id as text)."""
        return self.spikes.unit_name(unit)

    def _index(self, unit: int) -> int:
        i = int(np.searchsorted(self.imported_ids, unit))
        if i >= len(self.imported_ids) or self.imported_ids[i] != unit:
            raise RigsideError(f"unit must be one of the imported units, got {unit!r}")
        return i

    def row(self, unit: int) -> dict:
        """The table row of one imported unit, as a dict of plain values."""
        i = self._index(unit)
        return {k: v[i].item() if hasattr(v[i], "item") else v[i] for k, v in self.table.items()}

    def closest_fresh(self, unit: int) -> int | None:
        """Id of the fresh unit agreeing best with an imported unit, or None."""
        b = int(self.table["closest_fresh_unit"][self._index(unit)])
        return None if b == NO_UNIT else b

    def fresh_quality(self, unit: int) -> dict:
        """Quality numbers of a fresh unit that is some imported unit's closest fresh unit."""
        i = int(np.searchsorted(self.fresh_table["unit"], unit))
        if i >= len(self.fresh_table["unit"]) or self.fresh_table["unit"][i] != unit:
            raise RigsideError(f"unit must be the closest fresh unit of an imported unit, got {unit!r}")
        return {k: v[i].item() if hasattr(v[i], "item") else v[i] for k, v in self.fresh_table.items()}

    def imported_train(self, unit: int) -> tuple[np.ndarray, np.ndarray]:
        """Times (s) and main-channel amplitudes (uV) of one imported unit."""
        self._index(unit)
        lo, hi = self.spikes.span(unit)
        return self.spikes.times_s[lo:hi], self.imported_amplitude_uv[lo:hi]


def _check_inputs(recording: Recording, spikes: SpikeTrains, fresh: FreshUnits) -> None:
    ev = fresh.events
    if ev.n_samples != recording.n_samples or abs(ev.rate_hz - recording.rate_hz) > 1e-6 * recording.rate_hz:
        raise RigsideError(f"fresh units must come from this recording ({recording.n_samples} samples at "
                           f"{recording.rate_hz:g} Hz), got events of {ev.n_samples} samples at {ev.rate_hz:g} Hz")
    if len(fresh.sorting.data) != len(ev):
        raise RigsideError(f"fresh sorting must cover its {len(ev)} events, got {len(fresh.sorting.data)}")
    spikes.check_within(recording.duration_s, recording.rate_hz)


def _detected_support(spikes: SpikeTrains, placements: dict[int, Placement], events: EventTable,
                      params: Params, tol_samples: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Share of each unit's spikes with a detected event of its group nearby, the indices of
    detected events no imported spike claims, and the event each spike is matched to (-1: none)."""
    det = np.flatnonzero(events.mask(threshold_sigma=thresholds_sigma(params, events.sigma_uv)))
    by_group = {int(g): det[events.group[det] == g] for g in np.unique(events.group[det])}
    claimed = np.zeros(len(events), dtype=bool)
    ids, starts = spikes.bounds()
    share = np.zeros(len(ids))
    matched = np.full(len(spikes), -1, dtype=np.int64)
    for k, u in enumerate(ids):
        cand = by_group.get(placements[int(u)].group, det[:0])
        a = spikes.times_s[starts[k]:starts[k + 1]] * events.rate_hz
        ia, ib = match_times(a, events.sample[cand], tol_samples)
        share[k] = len(ia) / len(a)
        claimed[cand[ib]] = True
        matched[starts[k] + ia] = cand[ib]
    return share, det[~claimed[det]], matched


def run_audit(recording: Recording, spikes: SpikeTrains, fresh: FreshUnits,
              settings: AuditSettings | None = None, progress: ProgressFn = None,
              cancel: CancelFn = None) -> AuditResult:
    """Audit imported units against fresh units of the same recording.

    Parameters
    ----------
    recording
        The raw recording both sortings come from.
    spikes
        Imported spike trains (checked to lie inside the recording here).
    fresh
        Fresh units (:meth:`FreshUnits.from_session` or :func:`first_pass_units`); their
        parameters (filter, snippet window, threshold) are used throughout.
    settings
        Tolerance and other settings (defaults: :class:`AuditSettings`).
    progress, cancel
        Progress callback and cancel check.

    Returns
    -------
    AuditResult
        Per imported unit: support, overlap (Jaccard), closest fresh unit, estimates and quality numbers.
    """
    settings = settings or AuditSettings()
    settings.validate()
    _check_inputs(recording, spikes, fresh)
    params, events, sorting = fresh.params, fresh.events, fresh.sorting
    tol_s = settings.tolerance_ms / 1000.0
    bp = BandPass(recording, params.filter)
    placements = place_units(recording, bp, params, spikes, tol_s, settings.waveform_spikes, cancel=cancel,
                             progress=lambda f, m: report(progress, 0.15 * f, m))
    support, free, matched = _detected_support(spikes, placements, events, params, tol_s * recording.rate_hz)
    check(cancel)
    assigned = np.flatnonzero(sorting.assignments != NO_UNIT)
    imp_ids, fresh_ids, matches = shared_spike_matrix(spikes.times_s, spikes.units, events.time_s[assigned],
                                                      sorting.assignments[assigned], tol_s)
    report(progress, 0.2, "overlap matrix")
    n_imp = np.diff(spikes.bounds()[1])
    n_fresh = np.bincount(np.searchsorted(fresh_ids, sorting.assignments[assigned]), minlength=len(fresh_ids))
    overlap = jaccard(matches, n_imp, n_fresh)
    quality, amplitude = imported_quality(recording, params, spikes, placements, events, free,
                                          metric_settings(params), cancel=cancel,
                                          progress=lambda f, m: report(progress, 0.2 + 0.65 * f, m),
                                          separation_events=settings.separation_events, matched=matched)
    best = np.full(len(imp_ids), -1)                # column of the closest fresh unit, -1: none shares a spike
    if len(fresh_ids):
        best = np.where(matches.max(axis=1) > 0, overlap.argmax(axis=1), -1)
    best_ids = np.unique(fresh_ids[best[best >= 0]])
    fresh_table = _fresh_quality(fresh, best_ids, cancel)
    fresh_waves = {}
    for u in best_ids:
        check(cancel)
        chans = recording.groups[sorting.unit(int(u)).group]
        snips = unit_waveforms(bp, events.sample[sorting.events_of(int(u))], chans, params,
                               settings.waveform_spikes, cancel)
        fresh_waves[int(u)] = summarise(snips, chans, snippet_times_ms(params.snippets, recording.rate_hz))
    report(progress, 1.0, "audit done")
    table = audit_rows(imp_ids, fresh_ids, matches, overlap, best, n_imp, n_fresh, support, placements,
                       quality, {int(u): sorting.unit(int(u)).label for u in fresh_ids}, settings,
                       spikes.shown_ids(imp_ids))
    return AuditResult(spikes, fresh, settings, imp_ids, fresh_ids, matches, overlap, table, fresh_table,
                       placements, fresh_waves, amplitude)


def _fresh_quality(fresh: FreshUnits, unit_ids: np.ndarray, cancel: CancelFn) -> dict[str, np.ndarray]:
    data = fresh.sorting.data
    feats = Features(np.asarray(data.features), list(data.feature_names))
    has_pcs = any(n.startswith("PC") for n in feats.names)
    return unit_metrics_for_events(fresh.events, fresh.sorting.assignments, feats if has_pcs else None,
                                   metric_thresholds(fresh.params, fresh.events.sigma_uv),
                                   metric_settings(fresh.params), cancel=cancel,
                                   only_units=np.asarray(unit_ids, dtype=np.int64))
