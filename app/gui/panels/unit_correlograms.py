"""Autocorrelograms of the selected units and the cross-correlogram of the first two selected."""

from __future__ import annotations

import pyqtgraph as pg
from PySide6.QtWidgets import QHBoxLayout

from rigside.core.quality.correlograms import autocorrelogram, crosscorrelogram
from rigside.gui import palette
from rigside.gui.panels.unit_view_base import UnitView, histogram_table, spin, step_curve


class CorrelogramView(UnitView):
    title = "Correlograms"

    def __init__(self, controller, parent=None):
        super().__init__(controller, parent)
        self.bin_ms = self.add_control("bin", spin(1.0, 0.1, 50, 0.5, " ms", 1, "correlogram bin width"))
        self.window_ms = self.add_control("window ±", spin(50, 2, 1000, 10, " ms", 0,
                                                           "largest lag shown (rounded to whole bins)"))
        self.auto = palette.make_plot("lag (ms)", "pairs (count)")
        self.cross = palette.make_plot("lag of B after A (ms)", "pairs (count)")
        pair = QHBoxLayout()
        pair.addWidget(self.auto, 1)
        pair.addWidget(self.cross, 1)
        self.layout_.addLayout(pair, 1)
        self.finish_layout()
        self.pair: tuple[int, int] | None = None
        self.cross_counts = None
        self.autos: dict[int, tuple] = {}
        """Bin edges (ms) and counts of each autocorrelogram drawn last; ``cross`` the cross-correlogram's."""
        self.cross_drawn: tuple | None = None

    def plot_table(self, view) -> dict | None:
        """The drawn correlograms of one of the two plots as a described table (None when empty)."""
        if view is self.auto and self.autos:
            rows = [("auto", u, "", edges, counts) for u, (edges, counts) in self.autos.items()]
            return histogram_table("rigside autocorrelograms", rows)
        if view is self.cross and self.cross_drawn is not None:
            return histogram_table("rigside cross-correlogram", [self.cross_drawn])
        return None

    def _bins(self) -> tuple[float, float]:
        bin_s = self.bin_ms.value() / 1e3
        n = max(1, round(self.window_ms.value() / self.bin_ms.value()))
        return bin_s, n * bin_s

    def draw(self, units: list[int]) -> None:
        for w in (self.auto, self.cross):
            w.getPlotItem().clear()
            w.getPlotItem().setTitle(None)
        self.pair, self.cross_counts, self.autos, self.cross_drawn = None, None, {}, None
        if not units:
            return
        bin_s, window_s = self._bins()
        ref = self.ctl.metric_settings().refractory_ms
        pa = self.auto.getPlotItem()
        shade = pg.LinearRegionItem((-ref, ref), movable=False, brush=pg.mkBrush(*palette.GREY, 50),
                                    pen=palette.pen(palette.GREY))
        shade.setZValue(-10)
        pa.addItem(shade)
        for u in units:
            counts, edges = autocorrelogram(self.unit_times(u), bin_s, window_s)
            self.autos[u] = (edges * 1e3, counts)
            pa.addItem(step_curve(edges, counts, self.ctl.unit_colour(u), 1e3))
        pa.setTitle("auto", size="9pt")
        pc = self.cross.getPlotItem()
        if len(units) < 2:
            pc.setTitle("cross: select 2 units", size="9pt")
            self.status.setText(f"Bins of {bin_s * 1e3:g} ms up to ±{window_s * 1e3:g} ms; "
                                "shaded in auto: ± refractory period.")
            return
        a, b = units[0], units[1]
        counts, edges = crosscorrelogram(self.unit_times(a), self.unit_times(b), bin_s, window_s)
        self.pair, self.cross_counts = (a, b), counts
        self.cross_drawn = ("cross", a, b, edges * 1e3, counts)
        pc.addItem(pg.PlotCurveItem(edges * 1e3, counts.astype(float), stepMode="center", fillLevel=0,
                                    brush=pg.mkBrush(*palette.GREY, 90), pen=palette.pen(palette.BLACK, 1.4)))
        pc.addItem(pg.InfiniteLine(0, angle=90, pen=palette.pen(palette.GREY, dash=True)))
        pc.setTitle(f"cross: A {a}, B {b}", size="9pt")
        self.status.setText(f"Bins of {bin_s * 1e3:g} ms up to ±{window_s * 1e3:g} ms; shaded in auto: ± refractory "
                            f"period. A dip at zero lag in the cross-correlogram suggests one neuron split in "
                            f"two (a merge question).")
