"""The second pass of a sort: spikes hidden by an overlap, found again after template subtraction.

Detection keeps one event per peak of a group's envelope within ± the dead time, so when two units
of one group fire within the dead time of each other only the larger spike is an event. After the
first pass, each unit's template (its mean aligned waveform on its group's usable channels, from
the PCA basis of its group and the unit's mean scores: the mean snippet projected on that basis)
is subtracted at every one of its events from the filtered recording, and the residual is searched
near those events (within ± the dead time) for peaks of the group envelope that pass the channel's
detection threshold and are the largest within ± the dead time of the residual. Each such peak is
matched against the templates of its group's units (amplitude scaled by least squares within
:data:`SCALE_RANGE`); it is recovered when the best template leaves a mean squared misfit of at most
``params.overlaps.max_misfit`` noise variances, and kept only if that unit has no event (detected or
recovered) within ± the dead time of it (a unit cannot fire twice within the dead time, so such a
peak would be its own spike subtracted imperfectly) and no event of the group sits on its sample.

Template subtraction as a way of resolving overlapping spikes: Segev R, Goodhouse J, Puchalla J,
Berry MJ II (2004), "Recording spikes from a large fraction of the ganglion cells in a retinal
patch", Nature Neuroscience 7:1155-1162 [memory]; also Pillow JW, Shlens J, Chichilnisky EJ,
Simoncelli EP (2013), "A model-based spike sorting algorithm for removing correlation artifacts in
multi-neuron recordings", PLoS ONE 8:e62123 [memory].

The pass streams over the filtered recording in the chunks of detection, with margins, in the
bounded pool of :func:`rigside.core.progress.run_bounded` (chunks without events are not read).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import maximum_filter1d

from rigside.core.errors import RigsideError
from rigside.core.events import EventColumns, EventTable
from rigside.core.io.recording import Recording
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn, report, run_bounded
from rigside.core.signal.chunk_pool import chunk_bounds
from rigside.core.signal.features import Features, put_scores, shape_features, usable_channels
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.pipeline import thresholds_sigma
from rigside.core.signal.snippet_pass import own_columns
from rigside.core.signal.snippets import align_subsample, cut_windows, peak_offset, snippet_window

SCALE_RANGE = (0.6, 1.6)
"""Amplitude scale a template may take when fitted to a found spike (common practice, no source)."""


@dataclass
class Recovered:
    """Events found by :func:`recover_overlaps`, time-sorted: their columns, the unit whose template
    each matches, and their features (the same columns as the detected events' features); and the
    detected events whose unit the fit of the pair changes (``moved``: event rows, ``moved_unit``)."""

    events: EventColumns
    unit: np.ndarray
    features: np.ndarray
    moved: np.ndarray
    moved_unit: np.ndarray


@dataclass
class _Found:
    """One chunk's finds in one group (fields as in :class:`Recovered`, ``moved_unit`` for every find)."""

    events: EventColumns
    unit: np.ndarray
    features: np.ndarray
    partner: np.ndarray
    partner_unit: np.ndarray


@dataclass
class _Group:
    """One channel group's part of the pass."""

    group: int
    channels: np.ndarray          # usable channels, in snippet column order
    units: np.ndarray             # unit ids of the group
    scaled: np.ndarray            # templates (units, samples, channels) in noise sigmas, float64
    slopes: np.ndarray            # their time derivative (per sample), for sub-sample shifts
    sample: np.ndarray            # assigned events: samples (sorted), ...
    template_of: np.ndarray       # ... the template index of each, ...
    own: np.ndarray               # ... the column of its channel, its amplitude (sigma) ...
    amplitude: np.ndarray
    rows: np.ndarray              # ... and its row of the event table
    taken: np.ndarray             # samples of every event of the group (sorted)
    pca: object                   # the group's PCA basis (for the recovered events' features)


def recover_overlaps(recording: Recording, events: EventTable, features: Features, assignments: np.ndarray,
                     params: Params, progress: ProgressFn = None, cancel: CancelFn = None) -> Recovered:
    """Find spikes hidden by overlaps, by template subtraction (see the module docstring).

    Parameters
    ----------
    recording
        The recording the events were detected on.
    events
        The detected events (at the detection threshold, as sorted).
    features
        Their features, with the PCA basis of each group (``features.bases``, from
        :func:`rigside.core.signal.features.compute_features`).
    assignments
        Unit id of every event (-1: none), e.g. the first pass's.
    params
        ``detect`` (thresholds, dead time, polarity), ``snippets`` (window), ``overlaps.max_misfit``,
        ``filter`` and ``run`` (chunks and workers).
    progress, cancel
        Progress callback (fraction of chunks done) and cancel check.

    Returns
    -------
    Recovered
        The recovered events, their units and features.
    """
    if features.bases is None:
        raise RigsideError("the overlap pass needs the PCA basis of each group, got features without one")
    assignments = np.asarray(assignments)
    if len(assignments) != len(events) or len(features.values) != len(events):
        raise RigsideError(f"assignments and features must have one row per event ({len(events)}), got "
                           f"{len(assignments)} and {len(features.values)}")
    rate = recording.rate_hz
    before, after = snippet_window(params.snippets, rate)
    dead = int(round(params.detect.dead_time_ms * rate / 1000))
    groups = _groups(recording, events, features, assignments, before + after)
    margin = 2 * (before + after + dead) + 2
    bounds = chunk_bounds(recording.n_samples, max(int(params.run.chunk_s * rate), margin))
    starts = np.array([b[0] for b in bounds], dtype=np.int64)
    at = np.searchsorted(starts, np.concatenate([g.sample for g in groups] or [[]]).astype(np.int64), "right") - 1
    busy = np.unique(np.clip(np.concatenate([at - 1, at, at + 1]), 0, len(bounds) - 1))  # finds may cross an edge
    work_list = [(int(i), 0) for i in busy]
    bp = BandPass(recording, params.filter)
    thr = thresholds_sigma(params, events.sigma_uv)
    sigma = np.asarray(events.sigma_uv, dtype=np.float64)
    parts: list[_Found] = []
    n_features = features.values.shape[1]

    def work(i: int, _: int):
        start, stop = bounds[i]
        lo, hi = max(0, start - margin), min(recording.n_samples, stop + margin)
        y = bp.read(lo, hi)
        return [_search(y, lo, (start, stop), g, sigma, thr, dead, (before, after), params, n_features,
                        rate) for g in groups]

    def collect(found) -> None:
        parts.extend(found)
        report(progress, len(parts) / max(1, len(groups) * len(work_list)), "looking for overlapping spikes")

    run_bounded(work, work_list, params.run.workers, collect, cancel)
    return _assemble(parts, n_features, dead, assignments)


def _groups(recording: Recording, events: EventTable, features: Features, assignments: np.ndarray,
            length: int) -> list[_Group]:
    """Templates and event samples of every group with units (templates from the PCA basis)."""
    out = []
    sigma = np.asarray(events.sigma_uv, dtype=np.float64)
    for g in np.unique(events.group):
        g = int(g)
        pca = features.bases.get(g)
        in_group = events.group == g
        assigned = in_group & (assignments >= 0)
        if pca is None or not assigned.any():
            continue
        channels = usable_channels(recording.groups[g], events.excluded)
        units, template_of = np.unique(assignments[assigned], return_inverse=True)
        k = pca.n_components_
        scores = np.zeros((len(units), k))
        np.add.at(scores, template_of, features.values[assigned, :k].astype(np.float64))
        scores /= np.bincount(template_of, minlength=len(units))[:, None]
        templates = (pca.mean_ + scores @ pca.components_).reshape(len(units), length, len(channels))
        scaled = templates / sigma[channels]
        own = own_columns(events.channel[assigned], np.zeros(int(assigned.sum()), np.int64), [channels],
                          recording.n_channels)
        out.append(_Group(g, channels, units, scaled, np.gradient(scaled, axis=1), events.sample[assigned],
                          template_of, own, events.amplitude_sigma[assigned], np.flatnonzero(assigned),
                          events.sample[in_group], pca))
    return out


def _search(y: np.ndarray, lo: int, span: tuple[int, int], g: _Group, sigma: np.ndarray, thr: np.ndarray,
            dead: int, window: tuple[int, int], params: Params, n_features: int, rate: float) -> _Found:
    """The recovered events of one group whose peak lies in ``span`` (file samples) of a filtered block."""
    (start, stop), (before, after) = span, window
    length = before + after
    sig = sigma[g.channels].astype(np.float32)
    scaled = y[:, g.channels] / sig
    a, b = np.searchsorted(g.sample, [lo + before + 1, lo + len(y) - after - 1])
    at = g.sample[a:b] - lo
    own = scaled[at[:, None] + np.arange(-1, 2)[None, :], g.own[a:b, None]]
    shift = peak_offset(own[:, 0], own[:, 1], own[:, 2])
    placed = g.scaled[g.template_of[a:b]] - shift[:, None, None] * g.slopes[g.template_of[a:b]]
    np.subtract.at(scaled, (at[:, None] + np.arange(-before, after)[None, :]).ravel(), placed.reshape(-1, len(sig)))
    polarity = params.detect.polarity
    signed = -scaled if polarity == "negative" else scaled if polarity == "positive" else np.abs(scaled)
    column = np.argmax(signed, axis=1)
    env = signed[np.arange(len(signed)), column]
    peak = env >= maximum_filter1d(env, 2 * dead + 1, mode="nearest")
    t = np.flatnonzero(peak & (env >= thr[g.channels][column]))
    t = t[(lo + t >= start) & (lo + t < stop) & (t >= before + dead + 1) & (t + after + dead + 1 <= len(y))]
    e, near = _nearest(g.sample, lo + t)
    keep = (near >= 1) & (near <= dead) & (_nearest(g.taken, lo + t)[1] >= 1) \
        & (env[t] >= params.overlaps.min_share * g.amplitude[e])
    t, e = t[keep], e[keep]
    x = cut_windows(scaled, lo, lo + t, np.arange(-before - dead, after + dead)).astype(np.float64)
    col_t = column[t]
    shift_c = peak_offset(scaled[t - 1, col_t], scaled[t, col_t], scaled[t + 1, col_t])
    unit_e, unit_c, ok = _pair_fit(x, g.sample[e] - lo - t, g, dead, params.overlaps.max_misfit,
                                   thr[g.channels][col_t] ** 2, (shift[e - a], shift_c, g.template_of[e]))
    for k in np.flatnonzero(ok):         # a unit fires once within the dead time: no second spike of it
        others = g.sample[(g.template_of == unit_c[k]) & (g.sample != g.sample[e[k]])]
        ok[k] = _nearest(others, lo + t[k:k + 1])[1][0] > dead
    t, e, unit_e, unit_c, col_t = t[ok], e[ok], unit_e[ok], unit_c[ok], col_t[ok]
    resid = scaled * sig
    aligned = align_subsample(cut_windows(resid, lo, lo + t, np.arange(-before - 1, after + 1)), col_t, before)
    feats = np.zeros((len(t), n_features), dtype=np.float32)
    feats[:, -3:] = shape_features(aligned, col_t, before, rate)
    put_scores(feats, np.arange(len(t)), g.pca, aligned.reshape(len(t), length * len(g.channels)))
    cols = EventColumns(sample=lo + t.astype(np.int64), channel=g.channels[col_t].astype(np.int32),
                        group=np.full(len(t), g.group, np.int32), amplitude_uv=resid[t, col_t],
                        amplitude_sigma=env[t].astype(np.float32), artefact=np.zeros(len(t), bool))
    return _Found(cols, g.units[unit_c].astype(np.int32), feats, g.rows[e], g.units[unit_e].astype(np.int32))


def _nearest(sorted_samples: np.ndarray, at: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index of the nearest of ``sorted_samples`` to each of ``at`` and its distance (large when none)."""
    if not len(sorted_samples):
        return np.zeros(len(at), np.int64), np.full(len(at), np.iinfo(np.int64).max)
    i = np.searchsorted(sorted_samples, at)
    left, right = np.maximum(i - 1, 0), np.minimum(i, len(sorted_samples) - 1)
    dl, dr = np.abs(at - sorted_samples[left]), np.abs(sorted_samples[right] - at)
    return np.where(dl <= dr, left, right), np.minimum(dl, dr)


def _pair_fit(x: np.ndarray, offset: np.ndarray, g: _Group, dead: int, max_misfit: float, min_gain: np.ndarray,
              fractions: tuple[np.ndarray, np.ndarray, np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Two spikes of two different units fitted to each window: one at the existing event, one at the find.

    ``x`` is the residual (noise sigmas) around each find, ``(n, length + 2 dead, channels)``, with the
    find's peak at ``before + dead``; ``offset`` is the existing event's offset from the find; ``fractions``
    holds the sub-sample peak positions of the event and the find, and the template subtracted at the
    event. Every pair of templates (i at the event, j at the find, i != j), each shifted to its sub-sample
    peak, is fitted with least-squares amplitudes (clipped to :data:`SCALE_RANGE`). Returns the best pair
    and whether it is accepted: its mean squared misfit is at most ``max_misfit`` and it explains at least
    ``min_gain`` (noise variances) more than the best single template at the event.
    """
    n, (k, length, _) = len(x), g.scaled.shape
    if n == 0 or k < 2:
        return np.zeros(n, np.int64), np.zeros(n, np.int64), np.zeros(n, bool)
    shift_e, shift_c, unit_e = fractions
    at_e = np.zeros((n, k) + x.shape[1:])
    at_c = np.zeros_like(at_e)
    for m in range(n):
        o = dead + int(offset[m])
        at_e[m, :, o:o + length] = g.scaled - shift_e[m] * g.slopes
        at_c[m, :, dead:dead + length] = g.scaled - shift_c[m] * g.slopes
    x = x + at_e[np.arange(n), unit_e]                            # the event's own template added back
    xa, xb = np.einsum("nwc,nkwc->nk", x, at_e), np.einsum("nwc,nkwc->nk", x, at_c)
    aa, bb = np.einsum("nkwc,nkwc->nk", at_e, at_e), np.einsum("nkwc,nkwc->nk", at_c, at_c)
    ab = np.einsum("niwc,njwc->nij", at_e, at_c)
    xx = np.sum(x ** 2, axis=(1, 2))
    det = aa[:, :, None] * bb[:, None, :] - ab ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        sa = np.clip((xa[:, :, None] * bb[:, None, :] - xb[:, None, :] * ab) / det, *SCALE_RANGE)
        sb = np.clip((xb[:, None, :] * aa[:, :, None] - xa[:, :, None] * ab) / det, *SCALE_RANGE)
    err = (xx[:, None, None] - 2 * sa * xa[:, :, None] - 2 * sb * xb[:, None, :] + sa ** 2 * aa[:, :, None]
           + sb ** 2 * bb[:, None, :] + 2 * sa * sb * ab)
    err[:, np.arange(k), np.arange(k)] = np.inf
    err[~np.isfinite(err)] = np.inf
    best = np.argmin(err.reshape(n, -1), axis=1)
    i, j = np.divmod(best, k)
    pair = err.reshape(n, -1)[np.arange(n), best]
    single_scale = np.clip(xa / aa, *SCALE_RANGE)
    single = np.min(xx[:, None] - 2 * single_scale * xa + single_scale ** 2 * aa, axis=1)
    ok = (pair / (x.shape[1] * x.shape[2]) <= max_misfit) & (single - pair >= min_gain)
    return i, j, ok


def _empty() -> EventColumns:
    return EventColumns(np.zeros(0, np.int64), np.zeros(0, np.int32), np.zeros(0, np.int32),
                        np.zeros(0, np.float32), np.zeros(0, np.float32), np.zeros(0, bool))


def _assemble(parts: list[_Found], n_features: int, dead: int, assignments: np.ndarray) -> Recovered:
    """Join the chunks' finds in time order; of two finds of one unit within the dead time (equal
    residual peaks on either side of a chunk edge), the earlier is kept. A detected event moves to
    the unit its pair fit gave it when that differs from its unit and no other find says otherwise."""
    parts = [p for p in parts if len(p.unit)]
    if not parts:
        return Recovered(_empty(), np.zeros(0, np.int32), np.zeros((0, n_features), np.float32),
                         np.zeros(0, np.int64), np.zeros(0, np.int32))
    names = ("sample", "channel", "group", "amplitude_uv", "amplitude_sigma", "artefact")
    cols = {n: np.concatenate([getattr(p.events, n) for p in parts]) for n in names}
    unit, feats = np.concatenate([p.unit for p in parts]), np.concatenate([p.features for p in parts])
    partner = np.concatenate([p.partner for p in parts])
    partner_unit = np.concatenate([p.partner_unit for p in parts])
    order = np.lexsort((cols["group"], cols["sample"]))
    cols = {n: v[order] for n, v in cols.items()}
    unit, feats, partner, partner_unit = unit[order], feats[order], partner[order], partner_unit[order]
    by_unit = np.lexsort((cols["sample"], unit))
    repeat = np.zeros(len(unit), dtype=bool)
    repeat[by_unit[1:]] = (np.diff(unit[by_unit]) == 0) & (np.diff(cols["sample"][by_unit]) <= dead)
    keep = ~repeat
    partner, partner_unit = partner[keep], partner_unit[keep]
    rows, first = np.unique(partner, return_index=True)
    agreed = np.array([np.all(partner_unit[partner == r] == partner_unit[f]) for r, f in zip(rows, first)], bool)
    moved = agreed & (partner_unit[first] != assignments[rows])
    return Recovered(EventColumns(**{n: v[keep] for n, v in cols.items()}), unit[keep], feats[keep],
                     rows[moved], partner_unit[first][moved])
