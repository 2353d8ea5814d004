"""Peak amplitude of every event of the selected units over time, with the threshold drawn."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg

from rigside.core.quality.unit_table import main_channel
from rigside.gui import palette
from rigside.gui.panels.scatter import OneStyleScatter
from rigside.gui.panels.unit_view_base import UnitView

POINT_LIMIT = 30_000
"""More events than this per unit are drawn as an even subsample."""


class AmplitudeView(UnitView):
    title = "Amplitude over time"

    def __init__(self, controller, parent=None):
        super().__init__(controller, parent)
        self.plot = palette.make_plot("time (s)", "peak (µV)")
        self.finish_layout(self.plot)
        self.thresholds_uv: dict[int, float] = {}
        self.n_points = 0

    def main_channel(self, unit: int) -> int:
        m = self.ctl.metrics.get(unit)
        if m is not None:
            return int(m["main_channel"])
        return main_channel(self.ctl.events.channel[self.ctl.sorting.events_of(unit)])

    def draw(self, units: list[int]) -> None:
        pi = self.plot.getPlotItem()
        pi.clear()
        self.thresholds_uv, self.n_points = {}, 0
        if not units:
            return
        s, ev = self.ctl.sorting, self.ctl.events
        thr = self.ctl.thresholds()
        signs = {"negative": (-1,), "positive": (1,), "both": (-1, 1)}[ev.polarity]
        parts = []
        for u in units:
            idx = s.events_of(u)
            if len(idx) > POINT_LIMIT:
                idx = idx[np.linspace(0, len(idx) - 1, POINT_LIMIT).astype(np.int64)]
            colour = self.ctl.unit_colour(u)
            item = OneStyleScatter(s.data.time_s[idx], s.data.amplitude_uv[idx], size=4, pen=None,
                                   brush=pg.mkBrush(*colour, 160))
            pi.addItem(item)
            self.n_points += len(idx)
            ch = self.main_channel(u)
            level = float(thr[ch] * ev.sigma_uv[ch])
            self.thresholds_uv[u] = level
            for sign in signs:
                pi.addItem(pg.InfiniteLine(sign * level, angle=0, pen=palette.pen(colour, 1.5, dash=True)))
            parts.append(f"{self.ctl.unit_name(u)}: threshold {level:.0f} µV on channel {ch}")
        pi.setXRange(0, ev.duration_s, padding=0.01)
        self.status.setText("Peaks on each event's detection channel; dashed: the threshold on each unit's main "
                            "channel. " + "; ".join(parts))
