"""Aligned snippets of many events, cut in one chunked pass over the filtered recording.

The recording is read in the chunks of detection (``params.run.chunk_s``), each with a
margin of the snippet window so that events near a chunk edge are whole, and filtered once
for every channel; each chunk's events are cut on their own group's channels (any order of
the channels in the group), aligned to the sub-sample peak and handed to a consumer. Chunks
run in the bounded thread pool of :func:`rigside.core.progress.run_bounded`, so memory stays flat
whatever the file length, and chunks without events are not read.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from rigside.core.errors import RigsideError
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn, report, run_bounded
from rigside.core.signal.chunk_pool import chunk_bounds, chunk_samples
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.local_frame import LocalFrame, LocalFrameCutter
from rigside.core.signal.snippets import align_subsample, cut_windows, slot_runs, snippet_window

Consumer = Callable[[np.ndarray, np.ndarray, list[tuple[int, int, int]]], None]
"""``consume(positions, aligned, runs)``: ``positions`` index the pass's events, ``aligned`` is
float32 (n, samples, channels), ``runs`` lists ``(slot, a, b)``: rows ``a:b`` belong to ``slot``.
Events of slots with the same channel count come in one call. Called from worker threads, for
disjoint positions."""


def own_columns(channel: np.ndarray, slot: np.ndarray, channels: list[np.ndarray], n_channels: int) -> np.ndarray:
    """Column of each event's channel among its slot's channels (vectorised, any channel order).

    Raises
    ------
    RigsideError
        If an event's channel is not one of its slot's channels.
    """
    table = np.full((len(channels), n_channels), -1, dtype=np.int64)
    for s, ch in enumerate(channels):
        table[s, ch] = np.arange(len(ch))
    own = table[slot, channel]
    if np.any(own < 0):
        bad = int(np.flatnonzero(own < 0)[0])
        raise RigsideError(f"event channel must be a usable channel of its group, got channel "
                           f"{int(channel[bad])} (dead, saturated or outside the group)")
    return own


def snippet_pass(bandpass: BandPass, samples: np.ndarray, slot: np.ndarray, own: np.ndarray,
                 channels: list[np.ndarray], params: Params, consume: Consumer,
                 progress: ProgressFn = None, cancel: CancelFn = None, y_um: np.ndarray | None = None,
                 centred: np.ndarray | None = None) -> None:
    """Cut, align and hand over the snippet of every event, chunk by chunk.

    Parameters
    ----------
    bandpass
        Band-pass bound to the recording.
    samples
        Peak sample of each event, sorted ascending, inside the file.
    slot
        Index into ``channels`` of each event (its channel group).
    own
        Column of each event's channel among its slot's channels (see :func:`own_columns`).
    channels
        Channels cut for each slot, in the order they appear in the snippet.
    params
        ``snippets`` sets the window, ``run`` the chunk length and worker count.
    consume
        Receives each chunk's aligned snippets, one call per slot present in the chunk.
    progress, cancel
        Progress callback (fraction of chunks done) and cancel check.
    y_um
        Position of each event along the probe: given, snippets are cut in the probe's local frame
        (:mod:`rigside.core.signal.local_frame`; column 0 the event's own site) instead of on the
        slot's channels; ``centred`` (as long as ``y_um``) then receives each event's frame-centred
        position (:data:`rigside.core.signal.local_frame.CENTRE_STEPS`).
    """
    samples = np.asarray(samples, dtype=np.int64)
    rec = bandpass.recording
    if len(samples) > 1 and np.any(np.diff(samples) < 0):
        raise RigsideError("snippet samples must be sorted ascending, got unsorted samples")
    if len(samples) and (samples[0] < 0 or samples[-1] >= rec.n_samples):
        raise RigsideError(f"snippet samples must lie inside the file (0..{rec.n_samples - 1}), "
                           f"got {int(samples[0])}..{int(samples[-1])}")
    before, after = snippet_window(params.snippets, rec.rate_hz)
    offsets = np.arange(-before - 1, after + 1)  # one extra sample each side for the alignment
    bounds = chunk_bounds(rec.n_samples, chunk_samples(params.run.chunk_s, rec.rate_hz, rec.n_channels, len(offsets)))
    cut_at = np.searchsorted(samples, [b[0] for b in bounds] + [rec.n_samples])
    work_list = [(i, i + 1) for i in range(len(bounds)) if cut_at[i + 1] > cut_at[i]]

    cutter = BlockCutter(channels, offsets, before) if y_um is None else \
        local_cutter(rec, channels, params, offsets, before)

    def work(i: int, _: int) -> None:
        a, b = int(cut_at[i]), int(cut_at[i + 1])
        start, stop = bounds[i]
        lo, hi = max(0, start - before - 1), min(rec.n_samples, stop + after + 1)
        block = bandpass.read(lo, hi)
        where = () if y_um is None else (y_um[a:b], None if centred is None else centred[a:b])
        for pos, aligned, runs in cutter.cut(block, lo, samples[a:b], slot[a:b], own[a:b], *where):
            consume(a + pos, aligned, runs)

    done = [0]

    def collect(_: None) -> None:
        done[0] += 1
        report(progress, done[0] / len(work_list), "cutting snippets")

    run_bounded(work, work_list, params.run.workers, collect, cancel)


def local_cutter(recording, channels: list[np.ndarray], params: Params, offsets: np.ndarray, before: int):
    """The local-frame cutter of a probe recording (:mod:`rigside.core.signal.local_frame`)."""
    frame = LocalFrame(recording.positions, channels, params.probe.radius_um)
    return LocalFrameCutter(frame, channels, offsets, before)


class BlockCutter:
    """Cuts and aligns the snippets of events on their slots' channels from one filtered block.

    Parameters
    ----------
    channels
        Channels cut for each slot, in the order they appear in the snippet.
    offsets
        Window offsets around the peak, with one extra sample each side for the alignment.
    before
        Samples before the peak in the unpadded window.
    """

    def __init__(self, channels: list[np.ndarray], offsets: np.ndarray, before: int) -> None:
        self.width = np.array([len(c) for c in channels], dtype=np.int64)
        self.table = np.zeros((len(channels), int(self.width.max()) if len(self.width) else 0), dtype=np.int64)
        for k, ch in enumerate(channels):
            self.table[k, :len(ch)] = ch
        self.offsets, self.before = offsets, before

    def cut(self, block: np.ndarray, lo: int, samples: np.ndarray, slot: np.ndarray,
            own: np.ndarray) -> list[tuple[np.ndarray, np.ndarray, list[tuple[int, int, int]]]]:
        """``(positions, aligned, runs)`` for each channel count among the events (see :data:`Consumer`;
        ``positions`` index the given events)."""
        out = []
        for pos, by_slot, runs in slot_runs(slot, self.width):
            chans = self.table[by_slot, :self.width[by_slot[0]]]
            aligned = align_subsample(cut_windows(block, lo, samples[pos], self.offsets, chans), own[pos],
                                      self.before)
            out.append((pos, aligned, runs))
        return out
