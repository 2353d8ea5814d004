"""Data for showing one imported unit beside its closest fresh unit (GUI audit view, report).

:func:`pair_view` gathers, for both sides, the spike times, main-channel amplitudes, a
subsample of filtered waveforms on the group's channels and the ISI histogram, plus which
spikes the two trains share. :meth:`PairView.spikes_between` gives both rasters inside a time
window, for marking them on the trace.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rigside.core.audit.imported import to_samples, unit_waveforms
from rigside.core.audit.run import AuditResult
from rigside.core.io.recording import Recording
from rigside.core.quality.correlograms import isi_histogram
from rigside.core.quality.matching import match_times
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.snippets import snippet_times_ms


@dataclass
class UnitView:
    """One side of a pair.

    Attributes
    ----------
    unit
        Unit id (imported or fresh).
    times_s, amplitudes_uv
        Spike times and signed amplitudes (imported: on the unit's main channel at each
        imported time; fresh: each event's peak on its detection channel).
    shared
        True for spikes matched one-to-one with the other side (within the tolerance).
    channels, waveform_times_ms, waveforms
        Group channels, snippet time axis and filtered snippets ``(n, samples, channels)`` of a
        spread-out subsample (empty when no recording was given).
    isi_counts, isi_edges_s
        ISI histogram (see :func:`rigside.core.quality.correlograms.isi_histogram`).
    """

    unit: int
    times_s: np.ndarray
    amplitudes_uv: np.ndarray
    shared: np.ndarray
    channels: np.ndarray
    waveform_times_ms: np.ndarray
    waveforms: np.ndarray
    isi_counts: np.ndarray
    isi_edges_s: np.ndarray


@dataclass
class PairView:
    """An imported unit and its closest fresh unit (``fresh`` is None when there is none)."""

    imported: UnitView
    fresh: UnitView | None
    row: dict

    def spikes_between(self, start_s: float, stop_s: float) -> dict[str, tuple[np.ndarray, np.ndarray]]:
        """Times and shared flags of both sides in ``[start_s, stop_s)``, keyed "imported"/"fresh"."""
        out = {}
        for name, side in (("imported", self.imported), ("fresh", self.fresh)):
            if side is None:
                continue
            lo, hi = np.searchsorted(side.times_s, [start_s, stop_s])
            out[name] = (side.times_s[lo:hi], side.shared[lo:hi])
        return out


def _side(unit, times, amps, shared, channels, t_ms, snips, isi_bin_s, isi_max_s) -> UnitView:
    counts, edges = isi_histogram(times, isi_bin_s, isi_max_s)
    return UnitView(int(unit), times, amps, shared, np.asarray(channels), t_ms, snips, counts, edges)


def pair_view(result: AuditResult, unit: int, recording: Recording | None = None, n_waveforms: int = 100,
              isi_bin_s: float = 0.001, isi_max_s: float = 0.05) -> PairView:
    """Everything needed to show imported ``unit`` beside its closest fresh unit.

    Parameters
    ----------
    result
        An audit result.
    unit
        Imported unit id.
    recording
        The audited recording, to cut waveforms; None leaves ``waveforms`` empty (the mean
        waveforms in ``result.placements`` / ``result.fresh_waveforms`` remain available).
    n_waveforms
        Snippets per side (spread over the recording).
    isi_bin_s, isi_max_s
        ISI histogram bin and range.
    """
    row = result.row(unit)
    t_imp, a_imp = result.imported_train(unit)
    best = result.closest_fresh(unit)
    params = result.fresh.params
    tol = result.settings.tolerance_ms / 1000.0
    place = result.placements[int(unit)]
    rate = result.fresh.events.rate_hz
    t_ms = snippet_times_ms(params.snippets, rate)
    bp = BandPass(recording, params.filter) if recording is not None else None

    def cut(times, channels):
        if bp is None:
            return np.zeros((0, len(t_ms), len(channels)), dtype=np.float32)
        return unit_waveforms(bp, to_samples(times, rate, recording.n_samples), channels, params, n_waveforms)

    shared_imp = np.zeros(len(t_imp), dtype=bool)
    fresh_view = None
    if best is not None:
        t_f, a_f = result.fresh.train(best)
        ia, ib = match_times(t_imp, t_f, tol)
        shared_imp[ia] = True
        shared_f = np.zeros(len(t_f), dtype=bool)
        shared_f[ib] = True
        chans = result.fresh_waveforms[best].channels
        fresh_view = _side(best, t_f, a_f, shared_f, chans, t_ms, cut(t_f, chans), isi_bin_s, isi_max_s)
    chans = place.waveform.channels
    imported = _side(unit, t_imp, a_imp, shared_imp, chans, t_ms, cut(t_imp, chans), isi_bin_s, isi_max_s)
    return PairView(imported, fresh_view, row)
