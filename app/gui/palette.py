"""Colours and pens shared by the panels.

The hues are the Okabe & Ito (2008) set, chosen to stay distinct under the common forms of
colour-blindness; meaning never rests on hue alone (markers and lines also differ in shape
or dash).
"""

from __future__ import annotations

from contextlib import contextmanager
from typing import Iterator

import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QGraphicsItem

BLACK = (0, 0, 0)
ORANGE = (230, 159, 0)
SKY = (86, 180, 233)
GREEN = (0, 158, 115)
YELLOW = (240, 228, 66)
BLUE = (0, 114, 178)
VERMILLION = (213, 94, 0)
PURPLE = (204, 121, 167)
GREY = (120, 120, 120)

BACKGROUND = "w"
FOREGROUND = (30, 30, 30)

TRACE = (40, 40, 60)
TRACE_SELECTED = BLUE
EVENT = VERMILLION
ARTEFACT = GREY
THRESHOLD = ORANGE
NOISE_BAND = (*SKY, 60)
NOISE_CURVE = GREY
HITS = GREEN
MISSES = PURPLE
FALSE_ALARMS = VERMILLION


def setup_pyqtgraph() -> None:
    """Global pyqtgraph options: light background, antialiasing off for speed."""
    pg.setConfigOptions(background=BACKGROUND, foreground=FOREGROUND, antialias=False,
                        useNumba=False)


def pen(colour, width: float = 1.0, dash: bool = False, dot: bool = False):
    style = Qt.PenStyle.DashLine if dash else Qt.PenStyle.DotLine if dot else Qt.PenStyle.SolidLine
    p = pg.mkPen(colour, width=width, style=style)
    p.setCosmetic(True)
    return p


def style_plot(plot: pg.PlotItem, x_label: str, y_label: str) -> None:
    """Axis labels with units and readable tick fonts."""
    plot.setLabel("bottom", x_label)
    plot.setLabel("left", y_label)
    plot.showGrid(x=True, y=True, alpha=0.15)
    for name in ("bottom", "left"):
        axis = plot.getAxis(name)
        axis.setTextPen(FOREGROUND)
        painted_once(axis)


@contextmanager
def drawn_afresh(scene) -> Iterator[None]:
    """Every item of ``scene`` drawn by its own paint while the block runs: a picture saved at another size or as
    vectors must not reuse the pixmaps kept for the screen (:func:`painted_once`)."""
    kept = [(item, item.cacheMode()) for item in scene.items()
            if item.cacheMode() != QGraphicsItem.CacheMode.NoCache]
    for item, _ in kept:
        item.setCacheMode(QGraphicsItem.CacheMode.NoCache)
    try:
        yield
    finally:
        for item, mode in kept:
            item.setCacheMode(mode)


def painted_once(*items: QGraphicsItem) -> None:
    """Paint these items into a pixmap kept until their content or the view changes: a line moving elsewhere in
    the plot (a threshold being dragged) then costs a blit of them, not a redraw of every label or segment."""
    for item in items:
        item.setCacheMode(QGraphicsItem.CacheMode.DeviceCoordinateCache)


def make_plot(x_label: str = "", y_label: str = "") -> pg.PlotWidget:
    """A plot widget without pyqtgraph's context menu and auto-range button, styled and labelled."""
    w = pg.PlotWidget(enableMenu=False)   # no menu built: about 5 ms less per plot at start-up
    pi = w.getPlotItem()
    pi.hideButtons()
    style_plot(pi, x_label, y_label)
    return w


def hex_colour(colour) -> str:
    return "#%02x%02x%02x" % tuple(colour[:3])


def key(items: list[tuple[str, tuple, str]]) -> str:
    """A one-line legend in rich text: (line glyph, colour, label) per item."""
    return " &nbsp; ".join(f"<span style='color:{hex_colour(c)}; font-weight:bold'>{glyph}</span> {label}"
                           for glyph, c, label in items)
