"""Waveforms of the selected channel's group: a random subset, their mean and spread."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QLabel, QVBoxLayout

from rigside.core.signal.snippets import event_snippets, snippet_times_ms
from rigside.gui import palette
from rigside.gui.panels.base import Panel

SUBSET = 150
MAX_CHANNELS = 8
GAP_FRACTION = 0.25


class WaveformPanel(Panel):
    panel_id = "waveforms"
    title = "Waveforms"

    def __init__(self, bench, runner, parent=None):
        super().__init__(bench, runner, parent)
        self.snippets = None
        self.channels = np.zeros(0, dtype=np.int64)
        self.n_events = 0
        self.plot = palette.make_plot("time from peak (ms), one block per channel", "µV")
        pi = self.plot.getPlotItem()
        self.overlay = pg.PlotCurveItem(pen=palette.pen((*palette.SKY, 90)), skipFiniteCheck=True)
        pi.addItem(self.overlay)
        self._bands: list[pg.FillBetweenItem] = []
        self._band_curves: list[pg.PlotCurveItem] = []
        self.mean = pg.PlotCurveItem(pen=palette.pen(palette.BLUE, 2.5))
        pi.addItem(self.mean)
        self._labels: list[pg.TextItem] = []
        self.status = QLabel("")
        self.status.setWordWrap(True)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.plot, 1)
        lay.addWidget(self.status)
        bench.events_changed.connect(self.request)
        bench.selection_changed.connect(self.request)
        bench.thresholds_changed.connect(self._on_thresholds)
        bench.recording_changed.connect(self._clear)

    def _on_thresholds(self, final: bool) -> None:
        if final:
            self.request()

    def _clear(self) -> None:
        self.snippets = None
        self.overlay.setData([], [])
        self.mean.setData([], [])
        for item in self._bands + self._band_curves + self._labels:
            self.plot.getPlotItem().removeItem(item)
        self._bands, self._band_curves, self._labels = [], [], []

    def request(self) -> None:
        """Pick a seeded random subset of the group's events at the current threshold and cut them."""
        b = self.bench
        ev = b.events
        if ev is None:
            return
        g = int(b.recording.channel_group[b.channel])
        candidates = np.flatnonzero(b.mask() & (ev.group == g))
        self.n_events = len(candidates)
        rng = np.random.default_rng(g)
        pick = np.sort(rng.choice(candidates, size=min(SUBSET, len(candidates)), replace=False))
        if len(pick) == 0:
            self._clear()
            self.status.setText(f"{b.recording.group_names[g]}: no events at this threshold.")
            return
        self.runner.submit("waveforms", "Cutting waveforms", _cut, b.recording, ev, b.analysis.params, pick,
                           on_done=self._show)

    def _show(self, result) -> None:
        snips, channels = result
        self._clear()
        self.snippets, self.channels = snips, np.asarray(channels)
        b = self.bench
        rec = b.recording
        t = snippet_times_ms(b.analysis.params.snippets, rec.rate_hz)
        cols = _columns(self.channels, b.channel)
        span = t[-1] - t[0]
        step = span * (1 + GAP_FRACTION)
        n, ns = snips.shape[0], snips.shape[1]
        xs, ys = [], []
        pi = self.plot.getPlotItem()
        lo_all, hi_all = 0.0, 0.0
        ticks = []
        roomy = self.plot.width() / max(1, len(cols)) > 110
        marks = (-0.5, 0.0, 0.5, 1.0) if roomy else (0.0,)
        for j, col in enumerate(cols):
            x = t + j * step
            data = snips[:, :, col]
            xs.append(np.tile(x, n))
            ys.append(data.ravel())
            mean, sd = data.mean(axis=0), data.std(axis=0)
            lower = pg.PlotCurveItem(x, mean - sd, pen=palette.pen(palette.BLUE, 1, dash=True))
            upper = pg.PlotCurveItem(x, mean + sd, pen=palette.pen(palette.BLUE, 1, dash=True))
            band = pg.FillBetweenItem(lower, upper, brush=(*palette.BLUE, 50))
            for item in (lower, upper, band):
                pi.addItem(item)
            self._band_curves += [lower, upper]
            self._bands.append(band)
            lo_all = min(lo_all, float(np.percentile(data, 0.5)))
            hi_all = max(hi_all, float(np.percentile(data, 99.5)))
            ticks += [(j * step + v, f"{v:g}") for v in marks if t[0] <= v <= t[-1]]
        x = np.concatenate(xs)
        y = np.concatenate(ys)
        connect = np.ones(len(x), dtype=bool)
        connect[ns - 1::ns] = False
        self.overlay.setData(x, y, connect=connect)
        means = [np.append(snips[:, :, col].mean(axis=0), np.nan) for col in cols]
        mean_x = [np.append(t + j * step, np.nan) for j in range(len(cols))]
        self.mean.setData(np.concatenate(mean_x), np.concatenate(means), connect="finite")
        for j, col in enumerate(cols):
            c = int(self.channels[col])
            colour = palette.hex_colour(palette.BLUE if c == b.channel else palette.FOREGROUND)
            weight = "bold" if c == b.channel else "normal"
            label = pg.TextItem(html=f"<span style='color:{colour}; font-weight:{weight}'>ch {c}</span>",
                                anchor=(0.5, 0))
            label.setPos(j * step + 0.5 * (t[0] + t[-1]), hi_all * 1.15)
            pi.addItem(label)
            self._labels.append(label)
        pi.getAxis("bottom").setTicks([ticks, []])
        pi.setYRange(lo_all * 1.1, hi_all * 1.3, padding=0)
        pi.setXRange(t[0], t[0] + step * len(cols) - span * GAP_FRACTION, padding=0.02)
        g = int(rec.channel_group[b.channel])
        self.status.setText(f"{rec.group_names[g]}: {n} of {self.n_events:,} events at the current "
                            f"threshold (random subset), mean (thick) and ± 1 SD (band); ch {b.channel} "
                            "(selected) in bold.")


def _columns(channels: np.ndarray, selected: int) -> list[int]:
    """Columns to draw: all of a small group, or the selected channel and its neighbours."""
    n = len(channels)
    if n <= MAX_CHANNELS:
        return list(range(n))
    here = int(np.flatnonzero(channels == selected)[0]) if selected in channels else 0
    start = int(np.clip(here - MAX_CHANNELS // 2, 0, n - MAX_CHANNELS))
    return list(range(start, start + MAX_CHANNELS))


def _cut(recording, events, params, index, progress=None, cancel=None):
    return event_snippets(recording, events, params, index, cancel=cancel)
