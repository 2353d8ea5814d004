"""ISI histogram of the selected units, with the refractory window shaded and the violations counted."""

from __future__ import annotations

import html

import pyqtgraph as pg

from rigside.core.quality.correlograms import isi_histogram
from rigside.core.quality.metric_settings import censored_note
from rigside.core.quality.metrics import isi_violations
from rigside.gui import palette
from rigside.gui.panels.unit_view_base import UnitView, histogram_table, spin, step_curve


class IsiView(UnitView):
    title = "Inter-spike intervals"

    def __init__(self, controller, parent=None):
        super().__init__(controller, parent)
        self.bin_ms = self.add_control("bin", spin(0.5, 0.05, 50, 0.25, " ms", 2, "histogram bin width"))
        self.max_ms = self.add_control("up to", spin(50, 2, 2000, 10, " ms", 0, "longest interval shown"))
        self.plot = palette.make_plot("interval between consecutive spikes (ms)", "intervals (count)")
        self.region = pg.LinearRegionItem(movable=False, brush=pg.mkBrush(*palette.GREY, 60),
                                          pen=palette.pen(palette.GREY))
        self.region.setZValue(-10)
        self.finish_layout(self.plot)
        self.curves: list[pg.PlotCurveItem] = []
        self.violations: dict[int, int] = {}
        self.histograms: dict[int, tuple] = {}
        """Bin edges (ms) and counts of each unit drawn last."""

    def plot_table(self, view) -> dict | None:
        """The drawn ISI histograms as a described table (None when no unit is shown)."""
        if view is not self.plot or not self.histograms:
            return None
        rows = [("isi", u, "", edges, counts) for u, (edges, counts) in self.histograms.items()]
        return histogram_table("rigside inter-spike interval histograms", rows)

    def draw(self, units: list[int]) -> None:
        pi = self.plot.getPlotItem()
        pi.clear()
        self.curves, self.violations, self.histograms = [], {}, {}
        if not units:
            return
        mp = self.ctl.metric_settings()
        pi.addItem(self.region)
        self.region.setRegion((mp.censored_ms, mp.refractory_ms))
        duration = self.ctl.events.duration_s
        parts = []
        for u in units:
            t = self.unit_times(u)
            counts, edges = isi_histogram(t, self.bin_ms.value() / 1e3, self.max_ms.value() / 1e3)
            self.histograms[u] = (edges * 1e3, counts)
            curve = step_curve(edges, counts, self.ctl.unit_colour(u), 1e3)
            pi.addItem(curve)
            self.curves.append(curve)
            v = isi_violations(t, duration, mp.refractory_ms / 1e3, mp.censored_ms / 1e3)
            self.violations[u] = v.n_violations
            c = v.contamination
            est = f"{100 * c:.1f} %" if c == c else f"undefined ({v.reason})"
            colour = palette.hex_colour(self.ctl.unit_colour(u))
            parts.append(f"<span style='color:{colour}'>■</span> {self.ctl.unit_name(u)}: "
                         f"{v.n_violations} violation{'s' if v.n_violations != 1 else ''}, contamination {est}")
        pi.setXRange(0, self.max_ms.value(), padding=0.01)
        self.status.setText(f"Shaded: refractory window {mp.censored_ms:g}–{mp.refractory_ms:g} ms "
                            f"({html.escape(censored_note(mp))}). "
                            + "; ".join(parts))
