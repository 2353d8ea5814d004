"""Visible slices of a recording for the trace view, reduced to min/max envelopes.

Only the samples around the visible window are read (filtered or raw), in chunks; when
many samples fall on one screen pixel, each run of ``step`` samples is kept as its
minimum and maximum. Runs are aligned to multiples of ``step`` from the start of the
file, so a block loaded at a fine step can be re-binned for any coarser power-of-two step.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rigside.core.io.recording import Recording
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.signal.filtering import BandPass

CHUNK_VALUES = 4_000_000  # samples x channels read at once


@dataclass
class Block:
    """Envelope of channels over ``[start, start + len(lo) * step)`` samples."""

    start: int
    step: int
    channels: tuple
    raw: bool
    lo: np.ndarray  # (bins, channels) minimum of each run
    hi: np.ndarray  # (bins, channels) maximum of each run (the same array when step is 1)

    @property
    def stop(self) -> int:
        return self.start + len(self.lo) * self.step

    def covers(self, start: int, stop: int, channels: tuple, raw: bool, step: int, n_samples: int) -> bool:
        return (self.channels == channels and self.raw == raw and self.step <= step
                and self.start <= start and (self.stop >= stop or self.stop >= n_samples))


def step_for(n_visible: int, pixels: int) -> int:
    """Power-of-two run length of at least one pixel's worth of samples (one min and one
    max per run, so two to four points per pixel), or 1 when samples are sparse."""
    per_pixel = n_visible / max(1, pixels)
    if per_pixel < 2:
        return 1
    return 1 << int(np.ceil(np.log2(per_pixel)))


def load_block(recording: Recording, bandpass: BandPass, start: int, stop: int, step: int,
               channels: np.ndarray, raw: bool, progress: ProgressFn = None,
               cancel: CancelFn = None) -> Block:
    """Read ``[start, stop)`` (extended to whole runs) and reduce it to runs of ``step``."""
    start = (max(0, start) // step) * step
    stop = min(recording.n_samples, -(-stop // step) * step)
    chans = np.asarray(channels, dtype=np.int64)
    per_chunk = max(step, (CHUNK_VALUES // max(1, len(chans))) // step * step)
    los, his = [], []
    for s in range(start, stop, per_chunk):
        check(cancel)
        e = min(stop, s + per_chunk)
        x = recording.read(s, e, chans) if raw else bandpass.read(s, e, chans)
        if step == 1:
            los.append(x)
        else:
            lo, hi = _runs(x, step)
            los.append(lo)
            his.append(hi)
        report(progress, (e - start) / max(1, stop - start), "reading traces")
    empty = np.zeros((0, len(chans)), dtype=np.float32)
    lo = np.concatenate(los) if los else empty
    hi = lo if step == 1 else (np.concatenate(his) if his else empty)
    return Block(start, step, tuple(int(c) for c in chans), raw, lo, hi)


def _runs(x: np.ndarray, step: int) -> tuple[np.ndarray, np.ndarray]:
    full = len(x) // step
    body = x[:full * step].reshape(full, step, x.shape[1])
    lo, hi = body.min(axis=1), body.max(axis=1)
    if len(x) > full * step:
        tail = x[full * step:]
        lo = np.vstack([lo, tail.min(axis=0, keepdims=True)])
        hi = np.vstack([hi, tail.max(axis=0, keepdims=True)])
    return lo, hi


def visible_envelope(block: Block, start: int, stop: int, step: int) -> tuple[np.ndarray, np.ndarray]:
    """Sample positions and values (points x channels) for ``[start, stop)`` at ``step``.

    With ``step`` 1 the samples themselves; otherwise min and max of each run, interleaved
    so that one polyline draws the envelope.
    """
    i0 = max(0, (start - block.start) // block.step)
    i1 = min(len(block.lo), -(-(stop - block.start) // block.step))
    factor = max(1, step // block.step)
    i0 = (i0 // factor) * factor
    if i1 <= i0:
        return np.zeros(0), np.zeros((0, block.lo.shape[1]), dtype=np.float32)
    lo, hi = block.lo[i0:i1], block.hi[i0:i1]
    x0 = block.start + i0 * block.step
    if factor == 1 and block.step == 1:
        return x0 + np.arange(len(lo), dtype=np.float64), lo
    if factor > 1:
        n = len(lo) // factor
        rest = len(lo) - n * factor
        nc = lo.shape[1]
        lo_b = lo[:n * factor].reshape(n, factor, nc).min(axis=1)
        hi_b = hi[:n * factor].reshape(n, factor, nc).max(axis=1)
        if rest:
            lo_b = np.vstack([lo_b, lo[n * factor:].min(axis=0, keepdims=True)])
            hi_b = np.vstack([hi_b, hi[n * factor:].max(axis=0, keepdims=True)])
        lo, hi = lo_b, hi_b
    run = block.step * factor
    pos = x0 + np.arange(len(lo), dtype=np.float64) * run
    values = np.empty((2 * len(lo), lo.shape[1]), dtype=np.float32)
    values[0::2] = lo
    values[1::2] = hi
    positions = np.repeat(pos, 2)
    positions[1::2] += run / 2
    return positions, values


def overview_block(overview, size: int, start: int, stop: int, channels: tuple) -> Block:
    """The bins of ``size`` samples of a :class:`rigside.core.signal.overview.Overview` covering ``[start, stop)``."""
    i0, lo, hi = overview.read(size, start, stop, np.asarray(channels, dtype=np.int64))
    return Block(i0 * size, size, tuple(channels), False, lo, hi)
