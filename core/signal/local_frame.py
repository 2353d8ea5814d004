"""Probe snippets in a local frame: the same places relative to each event's position.

On a probe one shank is one channel group, and a snippet cut on all its sites puts a unit's spikes
at different places of the vector whenever they peak on different sites; events of one unit
peaking on two neighbouring sites then look like two waveforms. The local frame instead samples
each event at fixed offsets from its own position estimate (``y_um`` of the event table): for
every column of sites of the shank (sites sharing one ``x_um``), at ``y_um + k * pitch`` for
``k = -m..m`` (``m = floor(radius / pitch)``, the neighbourhood radius), each value linearly
interpolated along the column between the two sites around it (common practice, no source).
Past the ends of a column the signal is taken to fall linearly to zero over one pitch, so the
frame changes continuously as an event's position moves along the probe; dead or saturated
sites are left out of the columns (the interpolation bridges them). Column 0 of a frame snippet
is the event's own (peak) site, which aligns the snippet to the sub-sample peak as
:func:`rigside.core.signal.snippets.align_subsample` does for group snippets; the frame's sites
follow, column by column, row by row from the most negative offset.

Events of one unit peaking on two adjacent sites thus give nearly the same frame (their
positions differ by the estimate's noise only), so PCA of the frame, fitted per shank, gives
features comparable across peak sites.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rigside.core.signal.snippets import align_subsample, cut_windows, slot_runs

CENTRE_STEPS = 3
"""Times each event's frame is moved to the centre of mass of its own peak amplitudes before it is
kept. The detection's position is a centre of mass over the peak site's neighbourhood, so the
events of one unit between two sites sit at two positions, each biased toward the site it peaked on
(see DEVELOPERS.md); over a frame centred on the event the bias is symmetric, and a few steps bring
the events of one unit to one position whichever site they peaked on."""


@dataclass(frozen=True)
class _Columns:
    """One slot's columns: per column the sites' ``y_um`` (ascending, one padding place a pitch past
    each end) and channels (-1 at the padding places), and the frame's row offsets (um)."""

    y: list[np.ndarray]
    channel: list[np.ndarray]
    dy: np.ndarray

    @property
    def size(self) -> int:
        return len(self.y) * len(self.dy)


def frame_pitch(positions: np.ndarray) -> float:
    """Spacing (um) of a shank's sites along the probe: the median step between successive sites of
    one column (sites sharing ``x_um``), else the median distance to the nearest other site, else 1."""
    steps = [np.diff(np.unique(positions[positions[:, 0] == x, 1])) for x in np.unique(positions[:, 0])]
    steps = np.concatenate(steps) if steps else np.zeros(0)
    steps = steps[steps > 0]
    if len(steps):
        return float(np.median(steps))
    if len(positions) > 1:
        d = np.hypot(*(positions[:, None, :] - positions[None, :, :]).transpose(2, 0, 1))
        np.fill_diagonal(d, np.inf)
        return float(np.median(d.min(axis=1)))
    return 1.0


def _columns(positions: np.ndarray, channels: np.ndarray, radius_um: float) -> _Columns:
    pos = positions[channels]
    pitch = frame_pitch(pos)
    m = int(np.floor(radius_um / pitch + 1e-9))
    ys, chs = [], []
    for x in np.unique(pos[:, 0]):
        on = np.flatnonzero(pos[:, 0] == x)
        on = on[np.argsort(pos[on, 1], kind="stable")]
        y = pos[on, 1]
        ys.append(np.concatenate([[y[0] - pitch], y, [y[-1] + pitch]]))
        chs.append(np.concatenate([[-1], channels[on], [-1]]))
    return _Columns(ys, chs, np.arange(-m, m + 1) * pitch)


class LocalFrame:
    """The local frame of every slot (channel group) of a probe.

    Parameters
    ----------
    positions
        ``(channels, 2)`` site positions (um) of the recording.
    channels
        Usable channels of each slot (dead and saturated ones left out).
    radius_um
        Neighbourhood radius: the frame reaches ``floor(radius / pitch)`` pitches each side.
    """

    def __init__(self, positions: np.ndarray, channels: list[np.ndarray], radius_um: float) -> None:
        pos = np.asarray(positions, dtype=np.float64)
        self.slots = [_columns(pos, np.asarray(ch, dtype=np.int64), radius_um) if len(ch) else None
                      for ch in channels]
        self.width = np.array([1 + (s.size if s is not None else 0) for s in self.slots], dtype=np.int64)

    def sources(self, slot: int, y_um: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """For events of one slot at ``y_um``: the two channels each frame site is interpolated from
        and their weights, both ``(n, frame sites, 2)`` (weight 0 where a source lies past an end)."""
        cols = self.slots[slot]
        t = np.asarray(y_um, dtype=np.float64)[:, None] + cols.dy[None, :]
        chans, weights = [], []
        for y, ch in zip(cols.y, cols.channel):
            j = np.searchsorted(y, t, side="right") - 1
            inside = (j >= 0) & (j < len(y) - 1)
            j = np.clip(j, 0, len(y) - 2)
            w = np.clip((t - y[j]) / (y[j + 1] - y[j]), 0.0, 1.0)
            pair = np.stack([ch[j], ch[j + 1]], axis=-1)
            wt = np.stack([1.0 - w, w], axis=-1) * inside[..., None] * (pair >= 0)
            chans.append(np.where(pair >= 0, pair, ch[1]))  # a real channel, weighted 0
            weights.append(wt)
        return np.concatenate(chans, axis=1), np.concatenate(weights, axis=1).astype(np.float32)


class LocalFrameCutter:
    """Cuts, aligns and interpolates the local-frame snippets of events from one filtered block
    (the probe counterpart of :class:`rigside.core.signal.snippet_pass.BlockCutter`).

    Parameters
    ----------
    frame
        The probe's :class:`LocalFrame`.
    channels
        Usable channels of each slot (the columns ``own`` refers to).
    offsets
        Window offsets around the peak, with one extra sample each side for the alignment.
    before
        Samples before the peak in the unpadded window.
    """

    def __init__(self, frame: LocalFrame, channels: list[np.ndarray], offsets: np.ndarray, before: int) -> None:
        self.frame, self.channels = frame, [np.asarray(c, dtype=np.int64) for c in channels]
        self.width = frame.width
        self.offsets, self.before = offsets, before

    def cut(self, block: np.ndarray, lo: int, samples: np.ndarray, slot: np.ndarray, own: np.ndarray,
            y_um: np.ndarray, centred: np.ndarray | None = None
            ) -> list[tuple[np.ndarray, np.ndarray, list[tuple[int, int, int]]]]:
        """``(positions, snippets, runs)`` per frame width among the events, as ``BlockCutter.cut``;
        ``snippets`` are float32 ``(n, samples, 1 + frame sites)``, column 0 the peak site, each frame
        centred on the event's frame-centred position (:data:`CENTRE_STEPS`), written to ``centred``
        (one value per event) when given."""
        out = []
        for pos, _, runs in slot_runs(slot, self.width):
            y = np.asarray(y_um, dtype=np.float64)[pos]
            for step in range(CENTRE_STEPS + 1):
                snips = self._frames(block, lo, samples[pos], runs, pos, own, y)
                if step < CENTRE_STEPS:
                    y = y + self._shift(snips, runs)
            if centred is not None:
                centred[pos] = y
            out.append((pos, snips, runs))
        return out

    def _frames(self, block: np.ndarray, lo: int, samples: np.ndarray, runs: list[tuple[int, int, int]],
                pos: np.ndarray, own: np.ndarray, y: np.ndarray) -> np.ndarray:
        n, f = len(pos), int(self.width[runs[0][0]]) - 1
        src = np.empty((n, f, 2), dtype=np.int64)
        wts = np.empty((n, f, 2), dtype=np.float32)
        peak = np.empty(n, dtype=np.int64)
        for s, a, b in runs:
            src[a:b], wts[a:b] = self.frame.sources(s, y[a:b])
            peak[a:b] = self.channels[s][own[pos[a:b]]]
        chans = np.concatenate([peak[:, None], src.reshape(n, 2 * f)], axis=1)
        aligned = align_subsample(cut_windows(block, lo, samples, self.offsets, chans),
                                  np.zeros(n, dtype=np.int64), self.before)
        pairs = aligned[:, :, 1:].reshape(n, aligned.shape[1], f, 2)
        sites = pairs[..., 0] * wts[:, None, :, 0] + pairs[..., 1] * wts[:, None, :, 1]
        return np.concatenate([aligned[:, :, :1], sites], axis=2).astype(np.float32)

    def _shift(self, snips: np.ndarray, runs: list[tuple[int, int, int]]) -> np.ndarray:
        """Move of each event's position to the centre of mass of its frame's peak amplitudes (the
        frame's values at the peak sample, of the peak's sign, negative parts left out)."""
        at = snips[:, self.before, :]
        amp = np.maximum(at[:, 1:] * np.sign(at[:, :1]), 0.0).astype(np.float64)
        out = np.zeros(len(snips))
        for s, a, b in runs:
            dy = np.tile(self.frame.slots[s].dy, len(self.frame.slots[s].y))
            total = amp[a:b].sum(axis=1)
            out[a:b] = np.where(total > 0, (amp[a:b] * dy).sum(axis=1) / np.where(total > 0, total, 1.0), 0.0)
        return out
