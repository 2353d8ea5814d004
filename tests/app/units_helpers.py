"""Helpers of the unit tests: a clustered demo window and mouse clicks in data coordinates."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QPoint, Qt
from PySide6.QtTest import QTest


def cluster_demo(win) -> None:
    """Run the first pass on the demo's current detection and wait for the quality numbers."""
    ctl = win.units
    ctl.files.timer.stop()      # autosaves are started by hand in these tests, so waits are exact
    assert ctl.cluster()
    assert win.wait_idle(60)
    assert ctl.sorting is not None, win.last_error
    assert win.wait_idle(60)


def biggest_unit(ctl) -> int:
    counts = ctl.sorting.counts()
    return max(counts, key=counts.get)


def select_biggest_pair(win) -> list[int]:
    """Select the two largest units of the biggest unit's group and wait for the plots."""
    ctl = win.units
    s = ctl.sorting
    counts = s.counts()
    group = s.unit(biggest_unit(ctl)).group
    pair = sorted((u for u in s.units if s.unit(u).group == group), key=counts.get, reverse=True)[:2]
    ctl.set_selection(pair)
    assert win.wait_idle(60)
    return pair


def click_data(plot_widget: pg.PlotWidget, x: float, y: float, qtbot) -> None:
    """A left click at data coordinates (x, y) of a plot, through the real mouse path."""
    vb = plot_widget.getPlotItem().getViewBox()
    scene = vb.mapViewToScene(pg.Point(x, y))
    pos = plot_widget.mapFromScene(scene)
    QTest.mouseClick(plot_widget.viewport(), Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier,
                     QPoint(int(pos.x()), int(pos.y())))
    qtbot.wait(5)


def rectangle(x0: float, x1: float, y0: float, y1: float) -> np.ndarray:
    return np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]], dtype=np.float64)
