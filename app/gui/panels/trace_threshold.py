"""The threshold drawn on the trace lanes: dashed levels on every shown channel and the drag handle."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg

from rigside.gui import palette


class ThresholdHandle:
    """Dashed threshold levels across the view and a handle that drags the selected channel's threshold.

    ``panel`` supplies the lane layout (``offsets``, ``lane``, ``spacing``) and the ``bench``.
    """

    def __init__(self, panel, plot_item) -> None:
        self.panel = panel
        self.bench = panel.bench
        self._placing = False
        self.lines = pg.PlotCurveItem(pen=palette.pen(palette.THRESHOLD, 1, dash=True))
        self.handle = pg.InfiniteLine(angle=0, movable=True, pen=palette.pen(palette.THRESHOLD, 3),
                                      hoverPen=palette.pen(palette.VERMILLION, 4), label="",
                                      labelOpts={"position": 0.04, "color": palette.FOREGROUND,
                                                 "fill": (255, 255, 255, 220), "anchors": [(0, 1), (0, 1)]})
        self.handle.setToolTip("Drag to set the detection threshold")
        plot_item.addItem(self.lines)
        plot_item.addItem(self.handle, ignoreBounds=True)
        self.handle.setVisible(False)
        self.handle.sigPositionChanged.connect(self._on_moved)
        self.handle.sigPositionChangeFinished.connect(self._on_released)

    def signs(self) -> list[float]:
        """Sides of the baseline the threshold lies on (both for two-sided detection)."""
        ev = self.bench.events
        pol = ev.polarity if ev is not None else self.bench.analysis.params.detect.polarity
        return {"negative": [-1.0], "positive": [1.0]}.get(pol, [-1.0, 1.0])

    def draw_lines(self) -> None:
        b = self.bench
        sigma = b.sigma_uv
        if sigma is None or b.recording is None or b.show_raw:
            self.lines.setData([], [])
            return
        shown = b.shown_channels
        thr_uv = b.thresholds_sigma[shown] * sigma[shown]
        offsets = self.panel.offsets[np.arange(len(shown))]
        ys = np.concatenate([offsets + s * thr_uv for s in self.signs()])
        ys = np.where(np.isfinite(ys), ys, np.nan)
        y = np.repeat(ys, 2)
        # only across the visible window: dashing a line far longer than the view is slow
        x = np.tile(list(b.view), len(ys))
        keep = np.isfinite(y)
        self.lines.setData(x[keep], y[keep], connect="pairs")

    def update_handle(self) -> None:
        b = self.bench
        p = self.panel
        sigma = b.sigma_uv
        if (sigma is None or b.recording is None or b.show_raw or p.lane[b.channel] < 0
                or sigma[b.channel] <= 0):
            self.handle.setVisible(False)
            return
        lane = int(p.lane[b.channel])
        s = float(sigma[b.channel])
        k = float(b.thresholds_sigma[b.channel])
        sign = self.signs()[0]
        near = f", {len(b.neighbourhood())} sites around" if b.scope == "neighbourhood" else ""
        label = self.handle.label
        label.format = f"ch {b.channel}{near}: {k:.2f} σ = {k * s:.1f} µV  (drag)"
        self._placing = True
        try:
            off = p.offsets[lane]
            bounds = sorted((off + sign * 0.5 * s, off + sign * min(60 * s, 2.0 * p.spacing)))
            if list(self.handle.bounds()) != bounds:     # each call moves the line and redraws its label
                self.handle.setBounds(bounds)
            if not self.handle.moving:
                self.handle.setValue(off + sign * k * s)
        finally:
            self._placing = False
        self.handle.setVisible(True)
        label.valueChanged()

    def handle_y(self, k_sigma: float) -> float:
        """Where the handle sits for ``k_sigma`` on the selected channel."""
        b = self.bench
        return float(self.panel.offsets[self.panel.lane[b.channel]]
                     + self.signs()[0] * k_sigma * b.sigma_uv[b.channel])

    def _value(self) -> float:
        b = self.bench
        off = self.panel.offsets[self.panel.lane[b.channel]]
        uv = abs(self.handle.value() - off)
        return uv / float(b.sigma_uv[b.channel]) if b.scale == "sigma" else uv

    def _on_moved(self, _line=None) -> None:
        if not self._placing and self.bench.events is not None:
            self.bench.set_threshold(self._value(), final=False)

    def _on_released(self, _line=None) -> None:
        if not self._placing and self.bench.events is not None:
            self.bench.set_threshold(self._value(), final=True)
