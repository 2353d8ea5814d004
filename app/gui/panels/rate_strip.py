"""Event rate across the whole recording; click or drag the window to move the traces there."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QLabel, QVBoxLayout

from rigside.gui import palette
from rigside.gui.panels.base import Panel

NICE_BINS_S = (0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 30.0, 60.0, 120.0, 300.0, 600.0)
MAX_BINS = 1200


def bin_width(duration_s: float) -> float:
    """Smallest nice bin width giving at most MAX_BINS bins."""
    for w in NICE_BINS_S:
        if duration_s / w <= MAX_BINS:
            return w
    return duration_s / MAX_BINS


class RateStripPanel(Panel):
    panel_id = "rate_strip"
    title = "Event rate over the recording"

    def __init__(self, bench, runner, parent=None):
        super().__init__(bench, runner, parent)
        self._bin_of_event = np.zeros(0, dtype=np.int64)
        self.bin_s = 1.0
        self._placing = False
        self.plot = palette.make_plot("time (s)", "events / s")
        pi = self.plot.getPlotItem()
        pi.setMouseEnabled(x=False, y=False)
        pi.getAxis("left").setWidth(56)
        self.rate = pg.PlotCurveItem(pen=palette.pen(palette.BLUE, 1.5),
                                     name="events, shown channels")
        self.artefacts = pg.PlotCurveItem(pen=palette.pen(palette.ARTEFACT, 1.5, dash=True),
                                          name="artefacts, all channels")
        pi.addItem(self.rate)
        pi.addItem(self.artefacts)
        self.region = pg.LinearRegionItem(values=(0, 1), brush=(*palette.ORANGE, 60),
                                          pen=palette.pen(palette.ORANGE, 2))
        self.region.setZValue(10)
        pi.addItem(self.region, ignoreBounds=True)
        self.region.sigRegionChangeFinished.connect(self._on_region)
        self.plot.scene().sigMouseClicked.connect(self._on_click)
        self.key = QLabel(palette.key([("━━", palette.BLUE, "events/s, shown channels"),
                                       ("╍╍", palette.ARTEFACT, "artefacts/s, all channels")])
                          + " &nbsp; · click, or drag the shaded window, to move the traces there")
        self.plot.setMinimumHeight(90)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.plot, 1)
        lay.addWidget(self.key)
        bench.events_changed.connect(self._on_events)
        bench.thresholds_changed.connect(self._on_thresholds)
        bench.selection_changed.connect(self._draw)
        bench.view_changed.connect(self._on_view)
        bench.recording_changed.connect(self._on_recording)

    def _on_recording(self) -> None:
        rec = self.bench.recording
        self.bin_s = bin_width(rec.duration_s)
        for item in (self.rate, self.artefacts):
            item.setData(np.zeros(1), np.zeros(0), stepMode="center")
        self.plot.getPlotItem().setXRange(0, rec.duration_s, padding=0.0)
        self.region.setBounds((0, rec.duration_s))
        self._on_view(*self.bench.view)

    def _on_events(self) -> None:
        ev = self.bench.events
        self._bin_of_event = (ev.sample / (self.bin_s * ev.rate_hz)).astype(np.int64)
        self._draw()

    def rates(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Bin edges (s), event rate of the shown channels and artefact rate per bin (/s)."""
        b = self.bench
        ev = b.events
        n_bins = int(np.ceil(ev.duration_s / self.bin_s))
        edges = np.arange(n_bins + 1) * self.bin_s
        edges[-1] = ev.duration_s
        widths = np.diff(edges)
        shown = np.zeros(ev.n_channels, dtype=bool)
        shown[b.shown_channels] = True
        keep = b.mask() & shown[ev.channel]
        counts = np.bincount(self._bin_of_event[keep], minlength=n_bins)[:n_bins]
        art = np.bincount(self._bin_of_event[ev.artefact], minlength=n_bins)[:n_bins]
        return edges, counts / widths, art / widths

    def _draw(self, *_: object) -> None:
        if self.bench.events is None:
            return
        edges, rate, art = self.rates()
        self.rate.setData(edges, rate, stepMode="center")
        self.artefacts.setData(edges, art, stepMode="center")
        self.plot.getPlotItem().setYRange(0, max(1.0, float(rate.max(initial=0)), float(art.max(initial=0))) * 1.1,
                                          padding=0)

    def _on_thresholds(self, final: bool) -> None:
        if final:
            self._draw()

    def _on_view(self, t0: float, t1: float) -> None:
        self._placing = True
        try:
            self.region.setRegion((t0, t1))
        finally:
            self._placing = False

    def _on_region(self, *_: object) -> None:
        if self._placing or self.bench.recording is None:
            return
        t0, t1 = self.region.getRegion()
        self.jump_to(0.5 * (t0 + t1))

    def jump_to(self, t: float) -> None:
        """Centre the trace view on time ``t`` (s), keeping its width."""
        b = self.bench
        t0, t1 = b.view
        half = 0.5 * (t1 - t0)
        dur = b.recording.duration_s
        centre = float(np.clip(t, half, max(half, dur - half)))
        b.set_view(max(0.0, centre - half), min(dur, centre + half))

    def _on_click(self, event) -> None:
        vb = self.plot.getPlotItem().getViewBox()
        if self.bench.recording is None or not vb.sceneBoundingRect().contains(event.scenePos()):
            return
        self.jump_to(vb.mapSceneToView(event.scenePos()).x())
