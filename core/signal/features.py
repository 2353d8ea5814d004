"""Features of each event: PCA scores of its group's waveforms and shape measures.

Snippets are first aligned to the sub-sample position of their peak (see
:func:`rigside.core.signal.snippets.align_subsample`). PCA (scikit-learn) is fitted per channel group on a
seeded random subset of the group's snippets (all usable channels of the group concatenated,
in the group's order: channels flagged dead or saturated are left out), then applied to every
event. Every event's snippet is cut once, by :func:`rigside.core.signal.snippet_pass.snippet_pass` (chunked
passes over the filtered recording): first the fit subsets of all groups, held until each
group's basis is fitted (at most ``pca_fit_events`` snippets per group, whatever the recording
length), then the other events, projected as they are cut. When every event of every group is
in its fit subset, the second pass reads nothing.
Shape features, on the event's own channel: signed peak (uV), trough-to-peak width (ms:
from the peak to the largest excursion of the opposite sign after it) and energy (mean
squared amplitude over the window and the group's channels, uV^2).
On a probe (site positions and event positions known) the snippets are cut in the local frame of
:mod:`rigside.core.signal.local_frame` instead of on all the shank's sites, PCA is fitted per shank
on those, the energy is taken over the frame, and the event's ``x_um``, ``y_um`` follow as two more
features (:data:`POSITION_FEATURES`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rigside.core.events import EventTable
from rigside.core.io.recording import Recording
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn, report
from rigside.core.signal.chunk_pool import single_threaded_pools
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.snippet_pass import local_cutter, own_columns, snippet_pass
from rigside.core.signal.snippets import snippet_window


@dataclass(frozen=True)
class Basis:
    """A channel group's fitted PCA: the mean and the components (rows) of its flattened snippets."""

    mean_: np.ndarray
    components_: np.ndarray

    @property
    def n_components_(self) -> int:
        return len(self.components_)


@dataclass
class Features:
    """Feature matrix (events x features, float32) and the name of each column; ``bases`` maps each
    channel group to its PCA basis when known (features just computed, or a checkpoint holding them)."""

    values: np.ndarray
    names: list[str]
    bases: dict[int, Basis] | None = None

    def column(self, name: str) -> np.ndarray:
        return self.values[:, self.names.index(name)]


POSITION_FEATURES = ("x_um", "y_um")
"""Feature columns a probe's events add after the shape features: their position estimate (um)."""


def feature_names(n_pcs: int, positions: bool = False) -> list[str]:
    """Names of the feature columns: PCs, shape features, and on probes the event position."""
    return [f"PC{i + 1}" for i in range(n_pcs)] + ["peak_uv", "width_ms", "energy_uv2"] + \
        (list(POSITION_FEATURES) if positions else [])


def shape_features(snips: np.ndarray, own: np.ndarray, before: int, rate_hz: float) -> np.ndarray:
    """Peak, trough-to-peak width and energy for snippets (n, samples, channels).

    ``own`` gives, per snippet, the column of its event channel.
    """
    n = len(snips)
    trace = snips[np.arange(n), :, own]
    peak = trace[:, before]
    after = trace[:, before + 1:]
    if after.shape[1]:
        opposite = np.where(peak[:, None] < 0, after, -after)
        width = (np.argmax(opposite, axis=1) + 1) * 1000.0 / rate_hz
    else:
        width = np.zeros(n)
    energy = np.mean(snips.astype(np.float64) ** 2, axis=(1, 2))
    return np.column_stack([peak, width, energy]).astype(np.float32)


def usable_channels(channels: np.ndarray, excluded: dict[int, str]) -> np.ndarray:
    """The channels of a group that are not excluded (dead or saturated)."""
    return np.asarray([c for c in channels if int(c) not in excluded], dtype=np.int64)


def compute_features(recording: Recording, events: EventTable, params: Params, progress: ProgressFn = None,
                     cancel: CancelFn = None, index: np.ndarray | None = None) -> Features:
    """PCA and shape features for every event (or the events in ``index``).

    Parameters
    ----------
    recording
        The recording the events came from.
    events
        Event table (all groups).
    params
        ``params.snippets`` sets the window, component count, PCA fit subset and seed;
        ``params.run`` the chunk length and worker count of the passes.
    progress, cancel
        Progress callback and cancel check.
    index
        Restrict to these event indices (rows of the result follow ``index``).

    Returns
    -------
    Features
        One row per event, columns PC1..PCn, peak_uv, width_ms, energy_uv2.
    """
    sp = params.snippets
    sp.validate()
    bp = BandPass(recording, params.filter)
    before, after = snippet_window(sp, recording.rate_hz)
    idx_all = np.arange(len(events)) if index is None else np.asarray(index, dtype=np.int64)
    order = np.argsort(events.sample[idx_all], kind="stable")
    sample, group = events.sample[idx_all][order], events.group[idx_all][order]
    groups = np.unique(group)
    slot = np.searchsorted(groups, group)
    channels = [usable_channels(recording.groups[int(g)], events.excluded) for g in groups]
    own = own_columns(events.channel[idx_all][order], slot, channels, recording.n_channels)
    local = recording.positions is not None and events.y_um is not None
    y_um = events.y_um[idx_all][order].astype(np.float64) if local else None
    peak_column = np.zeros_like(own) if local else own  # a local frame's column 0 is the peak site
    fit = _fit_subsets(slot, groups, sp.pca_fit_events, sp.seed)
    chosen = np.sort(np.concatenate(fit)) if len(fit) else np.zeros(0, dtype=np.int64)
    rest = np.setdiff1d(np.arange(len(sample)), chosen, assume_unique=True)
    share = len(chosen) / max(1, len(sample))
    names = feature_names(sp.n_pcs, local)
    out = np.zeros((len(idx_all), len(names)), dtype=np.float32)
    centred = np.zeros(len(sample))  # probes: the frame-centred positions, in time order
    row_of = np.zeros(len(sample), dtype=np.int64)
    for f in fit:
        row_of[f] = np.arange(len(f))
    held = [np.empty((len(f), (before + after) * w), dtype=np.float32)
            for f, w in zip(fit, _widths(recording, channels, params, before, local))]

    def cut(which: np.ndarray, put, share0: float, share1: float) -> None:
        def consume(pos: np.ndarray, aligned: np.ndarray, runs: list[tuple[int, int, int]]) -> None:
            ev = which[pos]
            out[order[ev], sp.n_pcs:sp.n_pcs + 3] = shape_features(aligned, peak_column[ev], before, recording.rate_hz)
            flat = aligned.reshape(len(pos), -1)
            for s, a, b in runs:
                put(s, ev[a:b], flat[a:b])
        moved = np.zeros(len(which))
        snippet_pass(bp, sample[which], slot[which], own[which], channels, params, consume,
                     lambda f, m: report(progress, share0 + (share1 - share0) * f, m), cancel,
                     None if y_um is None else y_um[which], moved if local else None)
        centred[which] = moved

    def hold(s: int, ev: np.ndarray, flat: np.ndarray) -> None:
        # a chunk brings all fit events of a group between two times, in time order: one slice
        first = int(row_of[ev[0]])
        held[s][first:first + len(ev)] = flat

    cut(chosen, hold, 0.0, share)
    bases: list[Basis | None] = []
    for s, x in enumerate(held):
        bases.append(fit_basis(x, sp.n_pcs, sp.seed))
        put_scores(out, order[fit[s]], bases[s], x)
        held[s] = None  # the group's subset is projected: free it

    cut(rest, lambda s, ev, flat: put_scores(out, order[ev], bases[s], flat), share, 1.0)
    if local:  # the position follows the shape features
        out[order, sp.n_pcs + 3:] = np.column_stack([events.x_um[idx_all][order], centred])
    report(progress, 1.0, "features done")
    return Features(out, names, {int(g): b for g, b in zip(groups, bases) if b is not None})


def _widths(recording: Recording, channels: list[np.ndarray], params: Params, before: int,
            local: bool) -> np.ndarray:
    """Columns of each slot's snippets: its usable channels, or its local frame's sites."""
    if local:
        return local_cutter(recording, channels, params, np.zeros(0), before).width
    return np.array([len(ch) for ch in channels], dtype=np.int64)


def fit_basis(x: np.ndarray, n_pcs: int, seed: int) -> Basis | None:
    """PCA basis (scikit-learn ``PCA``, seeded) of flattened snippets ``x`` (rows); ``None`` when there
    are too few rows or columns for one component."""
    n_comp = min(n_pcs, x.shape[1], len(x))
    if n_comp < 1 or len(x) <= n_comp:
        return None
    from sklearn.decomposition import PCA

    with single_threaded_pools():  # small matrices: one BLAS thread is faster here, and the same everywhere
        pca = PCA(n_components=n_comp, random_state=seed).fit(x)
    return Basis(pca.mean_, pca.components_)


def put_scores(out: np.ndarray, rows: np.ndarray, pca: Basis | None, flat: np.ndarray) -> None:
    """Write the PCA scores of flattened snippets into the first columns of ``out`` (none without a fit).

    The projection is scikit-learn's ``PCA.transform`` (centre, then project on the components)
    without its input checks, which cost more than the product on the few events of one chunk.
    """
    if pca is not None:
        scores = flat @ pca.components_.T
        scores -= pca.mean_.reshape(1, -1) @ pca.components_.T
        out[rows, :pca.n_components_] = scores


def fit_subset(n: int, size: int, seed: int, group: int) -> np.ndarray:
    """Sorted positions of a seeded random subset of at most ``size`` of a group's ``n`` events.

    The generator is seeded with ``(seed, group)``, so a group's subset depends on its own events only."""
    rng = np.random.default_rng([seed, group])
    return np.sort(rng.choice(n, size=min(n, size), replace=False))


def _fit_subsets(slot: np.ndarray, groups: np.ndarray, size: int, seed: int) -> list[np.ndarray]:
    """Per slot (group ``groups[slot]``), the positions (in time order) of its fit subset (:func:`fit_subset`)."""
    out = []
    for s, g in enumerate(groups):
        rows = np.flatnonzero(slot == s)
        out.append(rows[fit_subset(len(rows), size, seed, int(g))])
    return out
