"""Waveform snippets: filtered windows around events on their group's channels."""

from __future__ import annotations

import numpy as np

from rigside.core.params import SnippetParams
from rigside.core.progress import CancelFn, check
from rigside.core.signal.filtering import BandPass

MAX_SPAN = 1 << 18  # longest single filtered read when gathering snippets (samples)
JOIN_GAP = 4096     # extra gap (samples) still read in one go: filtering it costs less than a new read


def snippet_window(params: SnippetParams, rate_hz: float) -> tuple[int, int]:
    """Samples before and after the peak sample (the window is ``[-before, after)``)."""
    params.validate()
    return int(round(params.before_ms * rate_hz / 1000)), max(1, int(round(params.after_ms * rate_hz / 1000)))


def snippet_times_ms(params: SnippetParams, rate_hz: float) -> np.ndarray:
    """Time of each snippet sample relative to the peak, in milliseconds."""
    before, after = snippet_window(params, rate_hz)
    return np.arange(-before, after) * 1000.0 / rate_hz


def spread_subsample(n: int, k: int) -> np.ndarray:
    """Up to ``k`` indices of ``0..n-1`` spread evenly over the range."""
    if n <= k:
        return np.arange(n)
    return np.unique(np.round(np.linspace(0, n - 1, k)).astype(np.int64))


def extract_snippets(bandpass: BandPass, samples: np.ndarray, channels: np.ndarray,
                     params: SnippetParams, cancel: CancelFn = None, pad: int = 0) -> np.ndarray:
    """Filtered snippets around peak samples, on the given channels.

    Parameters
    ----------
    bandpass
        Band-pass bound to the recording.
    samples
        Peak samples, sorted ascending.
    channels
        Channels to cut (usually the events' group).
    params
        Window before and after the peak.
    cancel
        Cancel check, called between reads.
    pad
        Extra samples cut on each side (for sub-sample alignment).

    Returns
    -------
    numpy.ndarray
        float32 ``(len(samples), before + after + 2 pad, len(channels))`` in microvolts.
        Windows that run past the file's ends are zero-padded there.
    """
    samples = np.asarray(samples, dtype=np.int64)
    channels = np.asarray(channels, dtype=np.int64)
    if len(samples) > 1 and np.any(np.diff(samples) < 0):
        raise ValueError("snippet samples must be sorted, got unsorted samples")
    n_total = bandpass.recording.n_samples
    before, after = snippet_window(params, bandpass.recording.rate_hz)
    before, after = before + pad, after + pad
    length = before + after
    out = np.zeros((len(samples), length, len(channels)), dtype=np.float32)
    if not len(samples):
        return out
    # merge events into spans: a new read starts where the gap is wider than two filter
    # margins plus JOIN_GAP (each read pays for its margins and a fixed overhead)
    gap = np.diff(samples) > 2 * bandpass.margin + length + JOIN_GAP
    starts = np.concatenate([[0], np.flatnonzero(gap) + 1])
    ends = np.concatenate([starts[1:], [len(samples)]])
    offs = np.arange(-before, after)
    for a, b in zip(starts, ends):
        i = a
        while i < b:
            check(cancel)
            j = i + int(np.searchsorted(samples[i:b], samples[i] + MAX_SPAN, side="left"))
            j = max(j, i + 1)
            lo = max(0, int(samples[i]) - before)
            hi = min(n_total, int(samples[j - 1]) + after)
            out[i:j] = cut_windows(bandpass.read(lo, hi, channels), lo, samples[i:j], offs)
            i = j
    return out


def event_snippets(recording, events, params, index: np.ndarray, bandpass: BandPass | None = None,
                   cancel: CancelFn = None) -> tuple[np.ndarray, np.ndarray]:
    """Snippets of chosen events, which must all belong to one channel group.

    Parameters
    ----------
    recording
        The recording the events came from.
    events
        The :class:`~rigside.core.events.EventTable`.
    params
        Full :class:`~rigside.core.params.Params` (filter and snippet sections are used).
    index
        Indices of the events to cut (any order; the result follows it).

    Returns
    -------
    snippets, channels
        float32 ``(len(index), samples, channels)`` and the group's channel indices.
    """
    index = np.asarray(index, dtype=np.int64)
    groups = np.unique(events.group[index])
    if len(groups) > 1:
        raise ValueError(f"snippet events must come from one channel group, got groups {groups.tolist()}")
    channels = recording.groups[int(groups[0])] if len(groups) else recording.groups[0]
    bp = bandpass or BandPass(recording, params.filter)
    order = np.argsort(events.sample[index], kind="stable")
    snips = extract_snippets(bp, events.sample[index][order], channels, params.snippets, cancel)
    out = np.empty_like(snips)
    out[order] = snips
    return out, channels


def align_subsample(padded: np.ndarray, own: np.ndarray, before: int) -> np.ndarray:
    """Shift snippets so each peak sits exactly at sample ``before``.

    The peak's sub-sample position on the event's own channel comes from a parabola through
    the peak sample and its two neighbours; every channel of the snippet is then shifted by
    that fraction of a sample with linear interpolation. Without this, a one-sample jitter of
    the detected peak splits one unit into two modes in PCA space.

    Parameters
    ----------
    padded
        Snippets cut with ``pad=1`` (one extra sample each side), shape (n, length + 2, channels).
    own
        Column of each snippet's event channel.
    before
        Samples before the peak in the unpadded window.

    Returns
    -------
    numpy.ndarray
        Aligned snippets, float32 (n, length, channels).
    """
    n = len(padded)
    if n == 0:
        return padded[:, 1:-1]
    k = before + 1
    trace = padded[np.arange(n), :, own]
    delta = peak_offset(trace[:, k - 1], trace[:, k], trace[:, k + 1])[:, None, None]
    mid = padded[:, 1:-1]
    ahead = np.where(delta >= 0, padded[:, 2:], padded[:, :-2])
    return (mid + np.abs(delta) * (ahead - mid)).astype(np.float32)


def peak_offset(ym: np.ndarray, y0: np.ndarray, yp: np.ndarray) -> np.ndarray:
    """Sub-sample position of peaks (float32, -0.5..0.5 samples from the peak sample): the vertex of the
    parabola through the samples before, at and after each peak (0 where they lie on a line)."""
    denom = ym - 2 * y0 + yp
    with np.errstate(divide="ignore", invalid="ignore"):
        delta = np.where(np.abs(denom) > 1e-12, 0.5 * (ym - yp) / denom, 0.0)
    return np.clip(np.nan_to_num(delta), -0.5, 0.5).astype(np.float32)


def cut_windows(block: np.ndarray, start: int, samples: np.ndarray, offsets: np.ndarray,
                channels: np.ndarray | None = None) -> np.ndarray:
    """Windows of a filtered block around peak samples, zero where they leave the block.

    Parameters
    ----------
    block
        Filtered samples x channels, holding file samples ``[start, start + len(block))``.
    samples
        Peak samples (file positions).
    offsets
        Window sample offsets relative to the peak.
    channels
        Columns of ``block`` to cut, in this order: one list for every window ``(C,)``, or one
        per window ``(len(samples), C)``; all columns when ``None``.

    Returns
    -------
    numpy.ndarray
        float32 ``(len(samples), len(offsets), C)``.
    """
    idx = np.asarray(samples, dtype=np.int64)[:, None] + offsets[None, :] - start
    inside = (idx >= 0) & (idx < len(block))
    rows = np.clip(idx, 0, len(block) - 1)
    if channels is None:
        cut = block[rows]
    else:  # one flat gather: faster than indexing rows and columns together
        ch = np.asarray(channels, dtype=np.int64)
        flat = rows[:, :, None] * block.shape[1] + (ch[None] if ch.ndim == 1 else ch)[:, None, :]
        cut = np.ascontiguousarray(block).reshape(-1).take(flat)
    if not inside.all():
        cut = np.where(inside[..., None], cut, np.float32(0))
    return cut.astype(np.float32, copy=False)


def slot_runs(slot: np.ndarray, width: np.ndarray) -> list[tuple[np.ndarray, np.ndarray, list[tuple[int, int, int]]]]:
    """Events grouped by the snippet width of their slot: per width, the event positions (by slot),
    their slots and the runs ``(slot, a, b)`` (rows ``a:b`` of the group belong to ``slot``)."""
    order = np.lexsort((slot, width[slot]))
    by_slot = slot[order]
    edges = np.r_[0, np.flatnonzero(np.diff(by_slot)) + 1, len(order)]
    cuts = np.r_[0, np.flatnonzero(np.diff(width[by_slot])) + 1, len(order)]
    out = []
    for c0, c1 in zip(cuts[:-1], cuts[1:]):
        runs = [(int(by_slot[e0]), int(e0 - c0), int(e1 - c0))
                for e0, e1 in zip(edges[:-1], edges[1:]) if c0 <= e0 < c1]
        out.append((order[c0:c1], by_slot[c0:c1], runs))
    return out
