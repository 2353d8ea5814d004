"""Detection and features in one pass over the filtered recording (the path of ``sort``).

Each chunk is filtered once: its events are detected (:class:`rigside.core.signal.pipeline.BlockDetector`,
exactly the events of :func:`rigside.core.signal.pipeline.detect`), and those at the detection
threshold (artefacts included) are cut on their group's usable channels, aligned and given
their shape features at once (:mod:`rigside.core.signal.features`).

The PCA basis of a group needs a fit subset before any event can be projected. Chunks are
therefore taken in a spread order (bit-reversed chunk index: the first chunks taken lie evenly
over the whole file, and each further round halves the spacing), and each group's snippets are
held only until it holds ``pca_fit_events`` of them: its basis is then fitted (scikit-learn PCA,
seeded) on a seeded random subset of that size, the held snippets are projected and freed,
and the group's later events are projected as they come. A group that never holds that many
is fitted on all its events at the end, as :func:`rigside.core.signal.features.compute_features`
does. Memory stays bounded by ``pca_fit_events`` snippets per group whatever the file length.
On a probe the snippets are cut in the local frame (:mod:`rigside.core.signal.local_frame`) and the
events' positions are two more features, as in ``compute_features``.
The fit subset differs from ``compute_features`` (which draws it from all events of the group),
so on long files the two bases differ slightly; both are random subsets of the same events.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields

import numpy as np

from rigside.core.events import EventColumns, EventTable
from rigside.core.io.recording import Recording
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn
from rigside.core.signal.features import (
    Basis,
    Features,
    feature_names,
    fit_basis,
    fit_subset,
    put_scores,
    shape_features,
    usable_channels,
)
from rigside.core.signal.noise import NoiseEstimate
from rigside.core.signal.pipeline import BlockDetector, block_detector, stream_chunks, thresholds_sigma
from rigside.core.signal.snippet_pass import BlockCutter, local_cutter, own_columns
from rigside.core.signal.snippets import snippet_window


@dataclass
class _Chunk:
    """One chunk's events at the threshold (those under it are dropped as the chunk is done, so they
    are never all held at once), their feature rows and the flattened snippets not projected yet:
    ``(slot, rows of feats, snippets)``."""

    index: int
    cols: EventColumns
    feats: np.ndarray
    runs: list[tuple[int, np.ndarray, np.ndarray]] = field(default_factory=list)


class _Bases:
    """Per slot: the snippets held until ``size`` of them are, then the fitted basis."""

    def __init__(self, n_slots: int, size: int, n_pcs: int, seed: int) -> None:
        self.held: list[list[tuple[int, np.ndarray, np.ndarray, np.ndarray]] | None] = [[] for _ in range(n_slots)]
        self.count = np.zeros(n_slots, dtype=np.int64)
        self.basis: list[Basis | None] = [None] * n_slots
        self.size, self.n_pcs, self.seed = size, n_pcs, seed

    def take(self, chunk: _Chunk) -> None:
        for slot, rows, flat in chunk.runs:
            held = self.held[slot]
            if held is None:
                put_scores(chunk.feats, rows, self.basis[slot], flat)
                continue
            held.append((chunk.index, chunk.feats, rows, flat.copy()))  # a copy frees the chunk's snippets
            self.count[slot] += len(rows)
            if self.count[slot] >= self.size:
                self.fit(slot)
        chunk.runs = []

    def fit(self, slot: int) -> None:
        """Fit the slot's basis on a seeded subset of its held snippets (in time order) and project them."""
        held = sorted(self.held[slot], key=lambda h: h[0])
        self.held[slot] = None
        if not held:
            return
        x = np.concatenate([h[3] for h in held])
        pick = fit_subset(len(x), self.size, self.seed, slot)
        self.basis[slot] = basis = fit_basis(x[pick], self.n_pcs, self.seed)
        for _, feats, rows, flat in held:
            put_scores(feats, rows, basis, flat)

    def finish(self) -> None:
        for slot, held in enumerate(self.held):
            if held is not None:
                self.fit(slot)


def spread_order(n: int) -> list[int]:
    """``0..n-1`` in bit-reversed order: every prefix is spread evenly over the range."""
    bits = max(1, (n - 1).bit_length())
    return sorted(range(n), key=lambda i: int(format(i, f"0{bits}b")[::-1], 2))


def detect_with_features(recording: Recording, params: Params, progress: ProgressFn = None,
                         cancel: CancelFn = None, noise: NoiseEstimate | None = None) -> tuple[EventTable, Features]:
    """Events at the detection threshold (artefacts included) and their features, in one pass.

    Parameters
    ----------
    recording
        The recording (read-only), read in chunks of ``params.run.chunk_s``.
    params
        All parameters: detection as :func:`rigside.core.signal.pipeline.detect`, features as
        :func:`rigside.core.signal.features.compute_features`.
    progress, cancel
        Progress callback and cancel check.
    noise
        A noise estimate to reuse; measured when not given.

    Returns
    -------
    events, features
        The events of ``detect`` at the thresholds of ``params`` (``EventTable.mask`` with
        ``include_artefacts=True``) and one feature row per event. The pass hashes the whole
        file (``recording.content_hash``) as ``detect`` does.
    """
    params.snippets.validate()
    det = block_detector(recording, params, progress, cancel, noise)
    sp, rate = params.snippets, recording.rate_hz
    before, after = snippet_window(sp, rate)
    margin = max(det.margin, before + 1, after + 1)
    thr = thresholds_sigma(params, det.sigma).astype(np.float32)  # as EventTable.mask compares them
    channels = [usable_channels(g, det.excluded) for g in recording.groups]
    local = recording.positions is not None
    offsets = np.arange(-before - 1, after + 1)
    cutter = local_cutter(recording, channels, params, offsets, before) if local else \
        BlockCutter(channels, offsets, before)
    n_feats = len(feature_names(sp.n_pcs, local))
    bounds = det.chunks()

    def work(i: int) -> _Chunk:
        start, stop = bounds[i]
        lo, hi = max(0, start - margin), min(recording.n_samples, stop + margin)
        y = det.bandpass.read(lo, hi)
        d_lo, d_hi = max(0, start - det.margin), min(recording.n_samples, stop + det.margin)
        cols = det.events(y[d_lo - lo:d_hi - lo], d_lo, start, stop)  # detection's own block, as in detect
        rows = np.flatnonzero(cols.amplitude_sigma >= thr[cols.channel])
        slot = cols.group[rows].astype(np.int64)
        own = own_columns(cols.channel[rows], slot, channels, recording.n_channels)
        chunk = _Chunk(i, _rows(cols, rows), np.zeros((len(rows), n_feats), dtype=np.float32))
        centred = cols.y_um[rows].astype(np.float64) if local else None
        where = (centred, centred) if local else ()  # the frame-centred positions replace the estimates
        peak_column = np.zeros_like(own) if local else own  # a local frame's column 0 is the peak site
        for pos, aligned, runs in cutter.cut(y, lo, cols.sample[rows], slot, own, *where):
            chunk.feats[pos, sp.n_pcs:sp.n_pcs + 3] = shape_features(aligned, peak_column[pos], before, rate)
            flat = aligned.reshape(len(pos), -1)
            chunk.runs += [(s, pos[a:b], flat[a:b]) for s, a, b in runs]
        if local:  # the position follows the shape features
            chunk.feats[:, sp.n_pcs + 3:] = np.column_stack([cols.x_um[rows], centred])
        return chunk

    bases = _Bases(len(channels), sp.pca_fit_events, sp.n_pcs, sp.seed)
    done: list[_Chunk] = []

    def collect(chunk: _Chunk) -> None:
        bases.take(chunk)
        done.append(chunk)

    stream_chunks(det, work, spread_order(len(bounds)), collect, progress, cancel, "detecting and cutting")
    bases.finish()
    chunks = sorted(done, key=lambda c: c.index)
    done.clear()
    return _assemble(det, chunks, feature_names(sp.n_pcs, local), bases)


def _assemble(det: BlockDetector, chunks: list[_Chunk], names: list[str],
              bases: _Bases) -> tuple[EventTable, Features]:
    """The event table and features of the chunks (file order); ``chunks`` is emptied on the way, so
    that their arrays are freed before the features are put in time order."""
    table, order = det.assemble([c.cols for c in chunks])
    feats = np.concatenate([c.feats for c in chunks]) if chunks else np.zeros((0, len(names)), dtype=np.float32)
    chunks.clear()
    bases_of = {g: b for g, b in enumerate(bases.basis) if b is not None}
    return table, Features(feats if order is None else feats[order], names, bases_of)


def _rows(cols: EventColumns, rows: np.ndarray) -> EventColumns:
    """The chosen rows of a block's event columns (positions too, when it has them)."""
    return type(cols)(**{f.name: None if getattr(cols, f.name) is None else getattr(cols, f.name)[rows]
                         for f in fields(cols)})
