"""Where a probe's events lie along the shank over time, coloured by amplitude: drift shows as bands
of large events that slope. Shown only for recordings with site positions.

The picture is an image of cells (``rigside.core.quality.depth_image``): each holds the largest
amplitude among the events at the current threshold inside it, so millions of events draw as fast as
a few. The shank is the one of the channel shown in the traces; zooming (in time or depth) grids the
shown span again, and the colour scale stays that of the whole shank.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QRectF, QTimer
from PySide6.QtWidgets import QLabel, QVBoxLayout

from rigside.core.quality.depth_image import MAX_DEPTH_BINS, MAX_TIME_BINS, event_depth_image
from rigside.gui import palette
from rigside.gui.panels.base import Panel

REGRID_MS = 150
"""Pause after a zoom or pan before the shown span is gridded again."""
CELL_PX = 2
"""Screen pixels per image cell (each way): a lone event shows as a dot, not a speck."""
AMPLITUDE_LABEL = "peak (µV)"


class DepthTimePanel(Panel):
    panel_id = "depth_time"
    title = "Event depth over time"

    def __init__(self, bench, runner, parent=None):
        super().__init__(bench, runner, parent)
        self.result = None
        self._shank: int | None = None
        self.plot_widget = pg.GraphicsLayoutWidget()
        self.plot = self.plot_widget.addPlot(row=0, col=0)
        self.plot.setMenuEnabled(False)
        self.plot.hideButtons()
        palette.style_plot(self.plot, "time (s)", "depth (µm)")
        self.image = pg.ImageItem(axisOrder="col-major")       # values are (time, depth): x then y
        self.plot.addItem(self.image)
        # small events pale on white, large ones dark; viridis's last yellows would vanish on white
        cmap = pg.colormap.get("viridis").getSubset(0.0, 0.85)
        cmap.reverse()
        self.bar = pg.ColorBarItem(values=(0.0, 1.0), colorMap=cmap, label=AMPLITUDE_LABEL, interactive=False)
        self.bar.setImageItem(self.image, insert_in=self.plot)
        self.note = QLabel("")
        self.note.setWordWrap(True)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.plot_widget, 1)
        lay.addWidget(self.note)
        self._regrid = QTimer(self, singleShot=True, interval=REGRID_MS)
        self._regrid.timeout.connect(self._request)
        self._drawing = False
        self._whole = True                 # the next image spans the whole recording and shank
        self.plot.getViewBox().sigRangeChanged.connect(self._on_range)
        bench.recording_changed.connect(self._clear)
        bench.events_changed.connect(self._on_events)
        bench.thresholds_changed.connect(lambda final: final and self._request())
        bench.selection_changed.connect(self._on_selection)

    # ---- state --------------------------------------------------------------------------
    def shown_shank(self) -> int | None:
        """The shank of the channel shown in the traces (None without site positions)."""
        rec = self.bench.recording
        if rec is None or rec.positions is None:
            return None
        return int(rec.shank[self.bench.channel])

    def _clear(self) -> None:
        self._regrid.stop()
        self.result, self._shank, self._whole = None, None, True
        self.image.clear()
        rec = self.bench.recording
        self.note.setText("" if rec is None or rec.positions is not None
                          else "This recording has no site positions: there is no depth to show.")

    def _on_events(self) -> None:
        self._whole = True
        self._request()

    def _on_selection(self) -> None:
        if self.shown_shank() != self._shank:
            self._whole = True
            self._request()

    def _on_range(self, *_: object) -> None:
        if not self._drawing and self.result is not None:
            self._regrid.start()

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        if self.result is not None:
            self._regrid.start()           # about one cell per CELL_PX pixels again

    # ---- drawing ------------------------------------------------------------------------
    def _request(self) -> None:
        b, shank = self.bench, self.shown_shank()
        if b.events is None or shank is None or b.events.y_um is None:
            return
        rec = b.recording
        self._shank = shank
        channels = np.flatnonzero(rec.shank == shank)
        (t0, t1), depths = self.plot.getViewBox().viewRange()
        t0, t1 = max(0.0, t0), min(rec.duration_s, t1)
        if self._whole or not t1 > t0:
            (t0, t1), depths = (0.0, rec.duration_s), None
        box = self.plot.getViewBox().boundingRect()
        bins = (min(MAX_TIME_BINS, max(10, int(box.width()) // CELL_PX)),
                min(MAX_DEPTH_BINS, max(10, int(box.height()) // CELL_PX)))
        self.runner.submit("depth_image", "Gridding event depths", event_depth_image, b.events, channels,
                           rec.positions[channels, 1], b.thresholds_sigma.copy(), (t0, t1), *bins,
                           None if depths is None else tuple(depths), on_done=self._on_image)

    def _on_image(self, result) -> None:
        if self.bench.events is None:
            return
        self.result = result
        (t0, t1), (d0, d1) = result.time_range, result.depth_range
        self._drawing = True
        try:
            self.image.setImage(result.values, autoLevels=False)
            self.image.setRect(QRectF(t0, d0, t1 - t0, d1 - d0))
            self.bar.setLevels(result.levels)
            if self._whole:
                self.plot.setRange(xRange=(t0, t1), yRange=(d0, d1), padding=0.0)
                self._whole = False
        finally:
            self._drawing = False
        name = f"shank {self._shank}" if len(np.unique(self.bench.recording.shank)) > 1 else "the probe"
        cells = result.values.shape
        self.note.setText(f"{result.n_events} events at the threshold on {name}, {t0:.3g}–{t1:.3g} s, in "
                          f"{cells[0]} × {cells[1]} cells, each coloured by its largest peak. A drifting unit "
                          "draws a sloping band; drag or zoom (wheel) to look closer.")
