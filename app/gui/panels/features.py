"""Any two features of the selected group's events, as points or, when dense, as a density image."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtGui import QTransform
from PySide6.QtWidgets import QComboBox, QHBoxLayout, QLabel, QVBoxLayout

from rigside.gui import palette
from rigside.gui.panels.base import Panel, highlight_sets, same_highlights
from rigside.gui.panels.scatter import OneStyleScatter

POINT_LIMIT = 20_000
DENSITY_BINS = 256
TIME = "time_s"
MEASURED_IN = {"peak_uv": "µV", "width_ms": "ms", "energy_uv2": "µV²", TIME: "s"}


def density(x: np.ndarray, y: np.ndarray, x_range, y_range, bins: int = DENSITY_BINS) -> np.ndarray:
    """Counts of points in a bins x bins grid over the given ranges (points outside dropped)."""
    fx = (x - x_range[0]) * (bins / (x_range[1] - x_range[0]))
    fy = (y - y_range[0]) * (bins / (y_range[1] - y_range[0]))
    ix, iy = fx.astype(np.int64), fy.astype(np.int64)
    ok = (fx >= 0) & (fy >= 0) & (ix < bins) & (iy < bins)
    return np.bincount(ix[ok] * bins + iy[ok], minlength=bins * bins).reshape(bins, bins)


def robust_range(v: np.ndarray) -> tuple[float, float]:
    """0.2 to 99.8 percentile, widened a little and never empty."""
    if len(v) == 0:
        return 0.0, 1.0
    lo, hi = np.percentile(v, [0.2, 99.8])
    pad = 0.05 * (hi - lo) if hi > lo else max(1.0, abs(lo))
    return float(lo - pad), float(hi + pad)


class FeaturePanel(Panel):
    panel_id = "features"
    title = "Features"

    def __init__(self, bench, runner, parent=None):
        super().__init__(bench, runner, parent)
        self.mode = "none"
        self.n_shown = 0
        self.x_combo, self.y_combo = QComboBox(), QComboBox()
        for combo in (self.x_combo, self.y_combo):
            combo.currentIndexChanged.connect(self._draw)
        top = QHBoxLayout()
        top.addWidget(QLabel("x:"))
        top.addWidget(self.x_combo, 1)
        top.addWidget(QLabel("y:"))
        top.addWidget(self.y_combo, 1)
        self.plot = palette.make_plot()
        pi = self.plot.getPlotItem()
        self.scatter = OneStyleScatter(size=3, pen=None, brush=pg.mkBrush(*palette.BLUE, 110))
        self.image = pg.ImageItem(axisOrder="row-major")
        cmap = pg.colormap.get("cividis")
        cmap.reverse()
        self.image.setLookupTable(cmap.getLookupTable(nPts=256))
        self.chosen: list[OneStyleScatter] = []     # one item per highlighted set, in its colour
        self.highlights: list[tuple[np.ndarray, tuple]] = []
        pi.addItem(self.image)
        pi.addItem(self.scatter)
        self.status = QLabel("Features appear when they have been computed.")
        self.status.setWordWrap(True)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addLayout(top)
        lay.addWidget(self.plot, 1)
        lay.addWidget(self.status)
        bench.features_changed.connect(self._on_features)
        bench.selection_changed.connect(self._draw)
        bench.thresholds_changed.connect(lambda final: final and self._draw())
        bench.recording_changed.connect(self._clear)

    def highlight(self, rows_and_colours: list[tuple[np.ndarray, tuple]]) -> None:
        """Draw these events (rows of the workbench's event table) on top, one colour per set
        (used to show selected units in one colour each)."""
        sets = highlight_sets(rows_and_colours)
        if same_highlights(sets, self.highlights):
            return
        self.highlights = sets
        self._draw()

    def _clear(self) -> None:
        self._set_chosen([])
        self.scatter.setData([], [])
        self.image.clear()
        self.mode = "none"
        self.status.setText("Features appear when they have been computed.")

    def _on_features(self) -> None:
        f = self.bench.analysis.features
        if f is None:
            self._clear()
            return
        names = list(f.names) + [TIME]
        for combo, default in ((self.x_combo, 0), (self.y_combo, 1)):
            combo.blockSignals(True)
            current = combo.currentText()
            combo.clear()
            combo.addItems(names)
            combo.setCurrentIndex(names.index(current) if current in names else min(default, len(names) - 1))
            combo.blockSignals(False)
        self._draw()

    def column(self, name: str) -> np.ndarray:
        f = self.bench.analysis.features
        return self.bench.events.time_s if name == TIME else f.column(name)

    def _draw(self, *_: object) -> None:
        self.when_shown(self._draw_now)

    def _draw_now(self) -> None:
        b = self.bench
        f = b.analysis.features
        if f is None or b.events is None or len(f.values) != len(b.events) or not self.x_combo.count():
            return
        ev = b.events
        g = int(b.recording.channel_group[b.channel])
        keep = np.flatnonzero(b.mask() & (ev.group == g))
        xn, yn = self.x_combo.currentText(), self.y_combo.currentText()
        x, y = self.column(xn)[keep], self.column(yn)[keep]
        self.n_shown = len(keep)
        pi = self.plot.getPlotItem()
        palette.style_plot(pi, _label(xn), _label(yn))
        xr, yr = robust_range(x), robust_range(y)
        if len(keep) <= POINT_LIMIT:
            self.mode = "points"
            self.image.clear()
            self.image.setVisible(False)
            self.scatter.setData(x, y)
        else:
            self.mode = "density"
            self.scatter.setData([], [])
            counts = density(x, y, xr, yr)
            self.image.setImage(np.log1p(counts.T.astype(np.float32)), autoLevels=True)
            tr = QTransform()
            tr.translate(xr[0], yr[0])
            tr.scale((xr[1] - xr[0]) / DENSITY_BINS, (yr[1] - yr[0]) / DENSITY_BINS)
            self.image.setTransform(tr)
            self.image.setVisible(True)
        self._draw_highlights(xn, yn, keep)
        pi.setXRange(*xr, padding=0)
        pi.setYRange(*yr, padding=0)
        name = b.recording.group_names[g]
        how = "points" if self.mode == "points" else "density (log count per cell)"
        self.status.setText(f"{name}: {len(keep):,} events at the current threshold, shown as {how}.")


    def _draw_highlights(self, xn: str, yn: str, shown: np.ndarray) -> None:
        sets = []
        for rows, colour in self.highlights:
            rows = rows[np.isin(rows, shown)]
            sets.append((self.column(xn)[rows], self.column(yn)[rows], colour))
        self._set_chosen(sets)

    def _set_chosen(self, sets: list[tuple[np.ndarray, np.ndarray, tuple]]) -> None:
        """One scatter item per highlighted set, drawn in the set's colour above the events."""
        pi = self.plot.getPlotItem()
        for item in self.chosen:
            pi.removeItem(item)
        self.chosen = [OneStyleScatter(x, y, size=5, pen=None, brush=pg.mkBrush(*colour[:3], 230))
                       for x, y, colour in sets if len(x)]
        for item in self.chosen:
            pi.addItem(item)


def _label(name: str) -> str:
    measured_in = MEASURED_IN.get(name)
    pretty = {"peak_uv": "peak", "width_ms": "trough-to-peak width", "energy_uv2": "energy", TIME: "time"}
    text = pretty.get(name, name)
    return f"{text} ({measured_in})" if measured_in else f"{text} (score)"
