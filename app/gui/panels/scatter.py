"""Scatter items whose points all share one style, set up without a per-point pass.

pyqtgraph's scatter item looks up every point's symbol, size, pen and brush in Python each time
its data are set (about 5 µs a point here), which made the window's scatters of tens of thousands
of events cost a large share of opening a session. When no point carries a style of its own (the
item's style is used for all), the lookup is done once and broadcast to every point.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg

STYLE_COLUMNS = ("symbol", "size", "pen", "brush")


class OneStyleScatter(pg.ScatterPlotItem):
    """A :class:`pyqtgraph.ScatterPlotItem` whose points are drawn in the item's own style; points given
    styles of their own (``brush=[...]`` etc.) or hover styles take the general, per-point way."""

    def _one_style(self, data: np.ndarray) -> bool:
        if not (self.opts["pxMode"] and self.opts["useCache"]) or self.opts["hoverable"]:
            return False
        default = {"symbol": None, "size": -1, "pen": None, "brush": None}
        return all(np.all(data[c] == default[c]) for c in STYLE_COLUMNS)

    def updateSpots(self, dataSet=None) -> None:  # noqa: N802 (pyqtgraph's name)
        data = self.data if dataSet is None else dataSet
        if not len(data) or not self._one_style(data):
            super().updateSpots(dataSet)
            return
        blank = data["sourceRect"]["w"] == 0
        if np.any(blank):
            style = tuple(self.opts[c] for c in STYLE_COLUMNS)
            data["sourceRect"][blank] = self.fragmentAtlas[[style]][0]
        self._updateMaxSpotSizes(data=data)
        self.invalidate()
