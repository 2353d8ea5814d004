"""Features of each event: PCA scores of its group's waveforms and shape measures.

Snippets are first aligned to the sub-sample position of their peak (see
:func:`rigside.core.signal.snippets.align_subsample`). PCA (scikit-learn) is fitted per channel group on a
seeded random subset of the group's snippets (all usable channels of the group concatenated:
channels flagged dead or saturated are left out), then applied to every event.
Shape features, on the event's own channel: signed peak (uV), trough-to-peak width (ms:
from the peak to the largest excursion of the opposite sign after it) and energy (mean
squared amplitude over the window and the group's channels, uV^2).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sklearn.decomposition import PCA

from rigside.core.events import EventTable
from rigside.core.io.recording import Recording
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.snippets import align_subsample, extract_snippets, snippet_window

BATCH = 50000


@dataclass
class Features:
    """Feature matrix (events x features, float32) and the name of each column."""

    values: np.ndarray
    names: list[str]

    def column(self, name: str) -> np.ndarray:
        return self.values[:, self.names.index(name)]


def feature_names(n_pcs: int) -> list[str]:
    return [f"PC{i + 1}" for i in range(n_pcs)] + ["peak_uv", "width_ms", "energy_uv2"]


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
        ``params.snippets`` sets the window, component count, PCA fit subset and seed.
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
    out = np.zeros((len(idx_all), sp.n_pcs + 3), dtype=np.float32)
    rng = np.random.default_rng(sp.seed)
    groups = np.unique(events.group[idx_all]) if len(idx_all) else []
    done = 0
    for g in groups:
        rows = np.flatnonzero(events.group[idx_all] == g)
        rows = rows[np.argsort(events.sample[idx_all[rows]], kind="stable")]
        channels = usable_channels(recording.groups[int(g)], events.excluded)
        own_col = np.searchsorted(channels, events.channel[idx_all[rows]]) if np.all(np.diff(channels) > 0) \
            else np.array([int(np.flatnonzero(channels == c)[0]) for c in events.channel[idx_all[rows]]])
        fit = np.sort(rng.choice(len(rows), size=min(len(rows), sp.pca_fit_events), replace=False))
        fit_raw = extract_snippets(bp, events.sample[idx_all[rows[fit]]], channels, sp, cancel, pad=1)
        fit_snips = align_subsample(fit_raw, own_col[fit], before)
        n_comp = min(sp.n_pcs, fit_snips.shape[1] * fit_snips.shape[2], len(fit))
        pca = (PCA(n_components=n_comp, random_state=sp.seed).fit(fit_snips.reshape(len(fit), -1))
               if n_comp >= 1 and len(fit) > n_comp else None)
        for b0 in range(0, len(rows), BATCH):
            check(cancel)
            part = rows[b0:b0 + BATCH]
            snips = align_subsample(extract_snippets(bp, events.sample[idx_all[part]], channels, sp, cancel, pad=1),
                                    own_col[b0:b0 + BATCH], before)
            if pca is not None:
                out[part, :n_comp] = pca.transform(snips.reshape(len(part), -1))
            out[part, sp.n_pcs:] = shape_features(snips, own_col[b0:b0 + BATCH], before, recording.rate_hz)
            done += len(part)
            report(progress, done / max(1, len(idx_all)), "computing features")
    return Features(out, feature_names(sp.n_pcs))
