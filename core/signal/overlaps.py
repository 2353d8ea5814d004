"""The second pass of a sort: spikes hidden by an overlap, found again after template subtraction.

Detection keeps one event per peak of a group's envelope within ± the dead time, so when two units
of one group fire within the dead time of each other only the larger spike is an event. After the
first pass, each unit's template (its mean aligned waveform on its group's usable channels, from
the PCA basis of its group and the unit's mean scores: the mean snippet projected on that basis),
shifted to each event's sub-sample peak, is subtracted at every one of its events from the filtered
recording, and the residual is searched near those events (within ± the dead time, not on an event)
for peaks of the group envelope that pass the channel's detection threshold, reach
``params.overlaps.min_share`` of the nearest event's amplitude (a large spike subtracted imperfectly
leaves a residual in proportion to its size) and are the largest within ± the dead time. Each such
peak is fitted together with that event as two spikes of two different units of the group (every
pair of templates, least-squares amplitudes, a pair whose either amplitude falls outside
:data:`SCALE_RANGE` left out: a template fitted at another size is not that unit's); the best pair is kept when it
leaves a mean squared misfit of at most ``params.overlaps.max_misfit`` noise variances per sample and
explains more than the event alone (by the threshold squared), and when the found spike's unit has no
other event within ± the dead time (a unit cannot fire twice within the dead time). The pair fit may
give the event itself another unit: the event's waveform was distorted by the overlap.

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

from rigside.core.errors import RigsideError
from rigside.core.events import EventColumns, EventTable
from rigside.core.heap import give_back
from rigside.core.io.recording import Recording
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn, report, run_bounded
from rigside.core.signal.chunk_pool import chunk_bounds, chunk_samples
from rigside.core.signal.features import Features, put_scores, shape_features, usable_channels
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.overlap_kernel import POLARITY_CODES, group_finds
from rigside.core.signal.pipeline import GIVE_BACK_EVERY, thresholds_sigma
from rigside.core.signal.snippets import align_subsample, peak_offset, snippet_window

SCALE_RANGE = (0.6, 1.6)
"""Amplitude scales a template may take in a pair fit (common practice, no source). Clipping the scale
instead let a spike of half a large unit's size join it at the bound: on demo seed 4, 35 hidden spikes of
one unit went to a unit twice their size, and that unit's agreement fell from 0.92 to 0.70."""

FIT_BATCH = 2048
"""Finds of a group held (with their residual windows and snippets) until they are fitted together:
bounds the pass's memory whatever the file length, and is large enough that the fit's cost per call
does not count."""


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
    """One batch of fitted finds of one group (fields as in :class:`Recovered`, ``moved_unit`` for every find)."""

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
    samples_of: list              # sorted samples of each unit's events
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
        ``detect`` (thresholds, dead time, polarity), ``snippets`` (window), ``overlaps``,
        ``filter`` and ``run`` (chunks and workers).
    progress, cancel
        Progress callback (fraction of chunks done) and cancel check.

    Returns
    -------
    Recovered
        The recovered events, their units and features.
    """
    assignments = _checked(events, features, assignments)
    rate = recording.rate_hz
    before, after = snippet_window(params.snippets, rate)
    dead = int(round(params.detect.dead_time_ms * rate / 1000))
    groups = _groups(recording, events, features, assignments, before + after)
    rows, group, template = _event_slots(events, assignments, groups)
    sample = events.sample[rows]
    margin = 2 * (before + after + dead) + 2
    bounds = chunk_bounds(recording.n_samples, chunk_samples(params.run.chunk_s, rate, recording.n_channels, margin))
    at = np.searchsorted([b[0] for b in bounds], sample, "right") - 1
    busy = np.unique(np.clip(np.concatenate([at - 1, at, at + 1]), 0, len(bounds) - 1))  # finds may cross an edge
    bp = BandPass(recording, params.filter)
    read, column = _read_channels(groups, recording.n_channels)
    thr = thresholds_sigma(params, events.sigma_uv)
    sigma = np.asarray(events.sigma_uv, dtype=np.float64)
    n_features = features.values.shape[1]
    batches = _Batches(len(groups), lambda gi, finds: _fit_group(
        groups[gi], finds, events, template, dead, (before, after), params, n_features, rate))
    done = [0]

    def work(i: int, _: int) -> list:
        start, stop = bounds[i]
        lo, hi = max(0, start - margin), min(recording.n_samples, stop + margin)
        y = bp.read(lo, hi, read)
        a, b = np.searchsorted(sample, [lo, hi])
        pos, ev = sample[a:b] - lo, rows[a:b]
        inner = np.clip(pos, 1, len(y) - 2)
        ch = column[events.channel[ev]]
        shift = peak_offset(y[inner - 1, ch], y[inner, ch], y[inner + 1, ch])
        out = []
        for gi, g in enumerate(groups):
            m = group[a:b] == gi
            if m.any():
                r, col, env, near, win, snip = group_finds(
                    y, lo, start, stop, column[g.channels], sigma[g.channels], thr[g.channels], pos[m],
                    template[ev[m]],
                    shift[m], events.amplitude_sigma[ev[m]], g.scaled.astype(np.float32),
                    g.slopes.astype(np.float32), before, after, dead, POLARITY_CODES[params.detect.polarity],
                    params.overlaps.min_share)
                out.append((gi, (lo + r, col, env, ev[m][near], shift[m][near], win, snip)))
        return out

    def collect(part: list) -> None:
        for gi, finds in part:
            batches.add(gi, finds)
        done[0] += 1
        if done[0] % GIVE_BACK_EVERY == 0:
            give_back()
        report(progress, done[0] / len(busy), "looking for overlapping spikes")

    run_bounded(work, [(int(i), 0) for i in busy], params.run.workers, collect, cancel)
    return _assemble(batches.finish(), n_features, dead, assignments)


class _Batches:
    """Per group, the candidate finds (with their residual windows and snippets) held until
    :data:`FIT_BATCH` of them are, then fitted together by ``fit(group index, finds)``; only the
    fitted finds (event columns, units, features) are kept."""

    def __init__(self, n_groups: int, fit) -> None:
        self.pending: list[list[tuple]] = [[] for _ in range(n_groups)]
        self.held = np.zeros(n_groups, np.int64)
        self.fit, self.parts = fit, []

    def add(self, gi: int, finds: tuple) -> None:
        self.pending[gi].append(finds)
        self.held[gi] += len(finds[0])
        if self.held[gi] >= FIT_BATCH:
            self._fit(gi)

    def _fit(self, gi: int) -> None:
        finds = tuple(np.concatenate(x) for x in zip(*self.pending[gi]))
        self.pending[gi], self.held[gi] = [], 0
        self.parts.append(self.fit(gi, finds))

    def finish(self) -> list[_Found]:
        for gi in np.flatnonzero(self.held):
            self._fit(int(gi))
        return self.parts


def _checked(events: EventTable, features: Features, assignments: np.ndarray) -> np.ndarray:
    if features.bases is None:
        raise RigsideError("the overlap pass needs the PCA basis of each group, got features without one")
    assignments = np.asarray(assignments)
    if len(assignments) != len(events) or len(features.values) != len(events):
        raise RigsideError(f"assignments and features must have one row per event ({len(events)}), got "
                           f"{len(assignments)} and {len(features.values)}")
    return assignments


def _read_channels(groups: list[_Group], n_channels: int) -> tuple[np.ndarray, np.ndarray]:
    """The channels filtered (those of the groups taking part) and each channel's column among them."""
    read = np.unique(np.concatenate([g.channels for g in groups])) if groups else np.zeros(0, np.int64)
    column = np.full(n_channels, -1, np.int64)
    column[read] = np.arange(len(read))
    return read, column


def _event_slots(events: EventTable, assignments: np.ndarray,
                 groups: list[_Group]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rows of the events of groups with units (time order), the index of their group in ``groups``,
    and every event's template row in its group (-1 when in no unit)."""
    slot = np.full(int(events.group.max()) + 1 if len(events) else 0, -1, np.int64)
    slot[[g.group for g in groups]] = np.arange(len(groups))
    rows = np.flatnonzero(slot[events.group] >= 0) if len(groups) else np.zeros(0, np.int64)
    template = np.full(len(events), -1, np.int64)
    for g in groups:
        in_g = np.flatnonzero((events.group == g.group) & (assignments >= 0))
        template[in_g] = np.searchsorted(g.units, assignments[in_g])
    return rows, slot[events.group[rows]], template


def _groups(recording: Recording, events: EventTable, features: Features, assignments: np.ndarray,
            length: int) -> list[_Group]:
    """Templates of every group with two units or more (from the PCA basis; a pair fit needs two) and
    the samples of each unit."""
    out = []
    sigma = np.asarray(events.sigma_uv, dtype=np.float64)
    for g in np.unique(events.group):
        g = int(g)
        pca = features.bases.get(g)
        assigned = (events.group == g) & (assignments >= 0)
        units, template_of = np.unique(assignments[assigned], return_inverse=True)
        if pca is None or len(units) < 2:
            continue
        channels = usable_channels(recording.groups[g], events.excluded)
        k = pca.n_components_
        scores = np.zeros((len(units), k))
        np.add.at(scores, template_of, features.values[assigned, :k].astype(np.float64))
        scores /= np.bincount(template_of, minlength=len(units))[:, None]
        templates = (pca.mean_ + scores @ pca.components_).reshape(len(units), length, len(channels))
        scaled = templates / sigma[channels]
        samples = events.sample[assigned]
        out.append(_Group(g, channels, units, scaled, np.gradient(scaled, axis=1),
                          [samples[template_of == i] for i in range(len(units))], pca))
    return out


def _fit_group(g: _Group, finds: tuple[np.ndarray, ...], events: EventTable, template: np.ndarray, dead: int,
               window: tuple[int, int], params: Params, n_features: int, rate: float) -> _Found:
    """Pair fits, the one-spike-per-dead-time rule and features of candidate finds of one group (each
    find on its own: the finds of one chunk give the same rows as those of the whole file at once)."""
    sample, col, env, partner, shift_e, x, snip = finds
    before, after = window
    mid = before + dead
    shift_c = peak_offset(x[np.arange(len(x)), mid - 1, col], x[np.arange(len(x)), mid, col],
                          x[np.arange(len(x)), mid + 1, col])
    thr = thresholds_sigma(params, events.sigma_uv)[g.channels][col]
    unit_e, unit_c, ok = _pair_fit(x.astype(np.float64), events.sample[partner] - sample, g, dead,
                                   params.overlaps.max_misfit, thr ** 2, (shift_e, shift_c, template[partner]))
    for k in np.flatnonzero(ok):         # a unit fires once within the dead time: no second spike of it
        mine = g.samples_of[unit_c[k]]
        ok[k] = _nearest(mine[mine != events.sample[partner[k]]], sample[k:k + 1])[1][0] > dead
    if not ok.any():
        return _Found(_empty(), np.zeros(0, np.int32), np.zeros((0, n_features), np.float32),
                      np.zeros(0, np.int64), np.zeros(0, np.int32))
    sample, col, env, partner, unit_e, unit_c, snip = (v[ok] for v in (sample, col, env, partner, unit_e, unit_c,
                                                                       snip))
    aligned = align_subsample(snip, col, before)
    feats = np.zeros((len(sample), n_features), dtype=np.float32)
    feats[:, -3:] = shape_features(aligned, col, before, rate)
    put_scores(feats, np.arange(len(sample)), g.pca, aligned.reshape(len(sample), -1))
    cols = EventColumns(sample=sample.astype(np.int64), channel=g.channels[col].astype(np.int32),
                        group=np.full(len(sample), g.group, np.int32), amplitude_uv=snip[:, before + 1][
                            np.arange(len(sample)), col], amplitude_sigma=env.astype(np.float32),
                        artefact=np.zeros(len(sample), bool))
    return _Found(cols, g.units[unit_c].astype(np.int32), feats, partner, g.units[unit_e].astype(np.int32))


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
    peak, is fitted with least-squares amplitudes; pairs with an amplitude outside :data:`SCALE_RANGE`
    are left out. Returns the best pair
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
        sa = (xa[:, :, None] * bb[:, None, :] - xb[:, None, :] * ab) / det
        sb = (xb[:, None, :] * aa[:, :, None] - xa[:, :, None] * ab) / det
    err = (xx[:, None, None] - 2 * sa * xa[:, :, None] - 2 * sb * xb[:, None, :] + sa ** 2 * aa[:, :, None]
           + sb ** 2 * bb[:, None, :] + 2 * sa * sb * ab)
    low, high = SCALE_RANGE
    err[(sa < low) | (sa > high) | (sb < low) | (sb > high)] = np.inf   # a template of another size: not that unit
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
