"""The one-style scatter draws what pyqtgraph's own scatter item draws (the reference implementation)."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg

from rigside.gui.panels.scatter import OneStyleScatter
from rigside.gui.screenshot import pixels


def _rendered(item_class, x, y, **style) -> tuple[np.ndarray, object]:
    w = pg.PlotWidget()
    w.resize(300, 200)
    item = item_class(x, y, **style)
    w.addItem(item)
    w.setXRange(0, 1, padding=0)
    w.setYRange(0, 1, padding=0)
    image = pixels(w.grab().toImage())
    w.close()
    return image, item


def test_one_style_points_match_the_general_scatter_item(qtbot):
    rng = np.random.default_rng(0)
    x, y = rng.random(500), rng.random(500)
    style = dict(size=4, pen=None, brush=pg.mkBrush(200, 30, 30, 170))
    mine, fast = _rendered(OneStyleScatter, x, y, **style)
    ref, general = _rendered(pg.ScatterPlotItem, x, y, **style)
    # pyqtgraph's ScatterPlotItem as the reference: same atlas places, same maximal spot size, same pixels
    assert np.array_equal(fast.data["sourceRect"], general.data["sourceRect"])
    assert fast._maxSpotPxWidth == general._maxSpotPxWidth
    assert np.array_equal(mine, ref)
    empty, _ = _rendered(OneStyleScatter, np.zeros(0), np.zeros(0), **style)
    assert (mine != empty).any(axis=-1).sum() > 1000          # the points are drawn (500 points of 4 px)


def test_points_with_styles_of_their_own_take_the_general_way(qtbot):
    x, y = np.array([0.2, 0.5, 0.8]), np.array([0.5, 0.5, 0.5])
    brushes = [pg.mkBrush(255, 0, 0), pg.mkBrush(0, 0, 255), pg.mkBrush(255, 0, 0)]
    mine, fast = _rendered(OneStyleScatter, x, y, size=12, pen=None, brush=brushes)
    ref, general = _rendered(pg.ScatterPlotItem, x, y, size=12, pen=None, brush=brushes)
    assert np.array_equal(mine, ref)
    assert fast.data["sourceRect"][0] != fast.data["sourceRect"][1]      # two colours, two atlas places
    # data set again on an item with a style of its own: the points keep the brushes they are given
    again = OneStyleScatter(size=12, pen=None, brush=pg.mkBrush(0, 255, 0))
    again.setData(x, y, brush=brushes)
    assert again.data["brush"][1].color().blue() == 255
    assert again.data["sourceRect"][0] != again.data["sourceRect"][1]
