"""Saving a plot of the window: its picture (PNG through pyqtgraph's image exporter, SVG through Qt's
SVG generator) and, for the count-versus-threshold curve and the quality histograms, the numbers it
draws (CSV with described columns).

Every plot on screen is a target, named after its panel (and view); the plot clicked last comes
first. The picture is rendered on the GUI thread (painting belongs there, and takes milliseconds);
every file is written by the window's job runner, atomically.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass
from pathlib import Path

import pyqtgraph as pg
import pyqtgraph.exporters as pg_exporters
from PySide6.QtCore import QBuffer, QByteArray, QIODevice, QRectF, QSize
from PySide6.QtGui import QColor, QImage, QPainter, QTextDocument
from PySide6.QtSvg import QSvgGenerator
from PySide6.QtWidgets import QApplication, QWidget

from rigside.core.io.atomic import atomic_write
from rigside.core.quality.unit_table_io import write_described_csv
from rigside.gui import palette

IMAGE_FILTER = "PNG image (*.png);;SVG drawing (*.svg)"
PNG_SCALE = 2
"""PNG pictures have twice the plot's size on screen (sharp in documents and slides)."""


@dataclass
class PlotTarget:
    """One plot on screen: its name, its view, and the widget that can give its numbers (or None)."""

    name: str
    view: pg.GraphicsView
    owner: QWidget | None

    def caption(self) -> str:
        """Rich text above the picture: the plot's name and its colour key, if its view gives one."""
        key = self.owner.plot_key(self.view) if hasattr(self.owner, "plot_key") else ""
        return f"<b>{html.escape(self.name)}</b>" + (f"<br>{key}" if key else "")

    def table(self) -> dict | None:
        """The plot's numbers as ``{"title": lines, "meanings": {column: text}, "table": {column: values}}``."""
        return self.owner.plot_table(self.view) if hasattr(self.owner, "plot_table") else None


def _owner(view: QWidget, panel: QWidget) -> tuple[QWidget | None, QWidget | None]:
    """The nearest ancestor (up to the panel) giving numbers, and the nearest titled view inside the panel."""
    owner = titled = None
    w = view.parentWidget()
    while w is not None:
        if owner is None and (hasattr(w, "plot_table") or hasattr(w, "plot_key")):
            owner = w
        if titled is None and w is not panel and getattr(w, "title", ""):
            titled = w
        if w is panel:
            break
        w = w.parentWidget()
    return owner, titled


def _axis_label(view: pg.GraphicsView) -> str:
    item = view.getPlotItem() if hasattr(view, "getPlotItem") else None
    return item.getAxis("bottom").labelText if item is not None else ""


def plot_targets(window, last: QWidget | None = None) -> list[PlotTarget]:
    """Every plot visible in the window's panels, the one clicked last (``last``) first."""
    found: list[PlotTarget] = []
    for panel in window.panels.values():
        if not panel.isVisible():
            continue
        views = [v for v in panel.findChildren(pg.GraphicsView) if v.isVisible()]
        names = []
        for v in views:
            owner, titled = _owner(v, panel)
            names.append((f"{panel.title}: {titled.title}" if titled is not None else panel.title, owner, v))
        for name, owner, v in names:
            twin = sum(n == name for n, _, _ in names) > 1
            found.append(PlotTarget(f"{name} ({_axis_label(v)})" if twin else name, v, owner))
    found.sort(key=lambda t: t.view is not last)
    return found


def focused_view(widget: QWidget | None) -> pg.GraphicsView | None:
    """The plot view holding ``widget`` (a view or one of its children), if any."""
    while widget is not None and not isinstance(widget, pg.GraphicsView):
        widget = widget.parentWidget()
    return widget


def _visible_rect(view: pg.GraphicsView) -> QRectF:
    return view.mapToScene(view.viewport().rect()).boundingRect()


def _caption(text: str, width: float) -> QTextDocument:
    doc = QTextDocument()
    doc.setDocumentMargin(4)
    doc.setHtml(text)
    doc.setTextWidth(width)
    return doc


def png_bytes(view: pg.GraphicsView, caption: str = "") -> bytes:
    """The plot as PNG (pyqtgraph's image exporter, :data:`PNG_SCALE` times its size on screen),
    under the rich-text ``caption``."""
    exporter = pg_exporters.ImageExporter(view.scene())
    width = max(1, view.viewport().width())
    exporter.parameters()["width"] = width * PNG_SCALE
    with palette.drawn_afresh(view.scene()):
        plot = exporter.export(toBytes=True)
    doc = _caption(caption, width)
    top = math.ceil(doc.size().height() * PNG_SCALE) if caption else 0
    image = QImage(plot.width(), top + plot.height(), QImage.Format.Format_ARGB32)
    image.fill(QColor("white"))
    painter = QPainter(image)
    try:
        if caption:
            painter.scale(PNG_SCALE, PNG_SCALE)
            doc.drawContents(painter)
            painter.resetTransform()
        painter.drawImage(0, top, plot)
    finally:
        painter.end()
    data = QByteArray()
    buffer = QBuffer(data)
    buffer.open(QIODevice.OpenModeFlag.WriteOnly)
    image.save(buffer, "PNG")
    buffer.close()
    return bytes(data)


def svg_bytes(view: pg.GraphicsView, title: str, caption: str = "") -> bytes:
    """The plot as SVG under the rich-text ``caption``, drawn by Qt's SVG generator (pyqtgraph's own
    SVG exporter cannot read the paths this Qt writes)."""
    source = _visible_rect(view)
    doc = _caption(caption, source.width())
    top = math.ceil(doc.size().height()) if caption else 0
    data = QByteArray()
    buffer = QBuffer(data)
    buffer.open(QIODevice.OpenModeFlag.WriteOnly)
    generator = QSvgGenerator()
    generator.setOutputDevice(buffer)
    generator.setSize(QSize(math.ceil(source.width()), math.ceil(source.height()) + top))
    generator.setViewBox(QRectF(0, 0, source.width(), source.height() + top))
    generator.setTitle(title)
    generator.setDescription("a plot of the rigside window")
    painter = QPainter(generator)
    try:
        if caption:
            doc.drawContents(painter)
        with palette.drawn_afresh(view.scene()):
            view.scene().render(painter, QRectF(0, top, source.width(), source.height()), source)
    finally:
        painter.end()
    buffer.close()
    return bytes(data)


def image_bytes(target: PlotTarget, path: Path) -> bytes:
    """The picture of ``target`` in the format ``path``'s suffix names (.png or .svg)."""
    QApplication.processEvents()      # pending redraws first: the file shows what the screen shows
    caption = target.caption()
    if path.suffix.lower() == ".svg":
        return svg_bytes(target.view, target.name, caption)
    return png_bytes(target.view, caption)


def write_bytes_job(path: Path, data: bytes, progress=None, cancel=None) -> Path:
    """Job: write ``data`` to ``path`` atomically."""
    return atomic_write(path, lambda tmp: tmp.write_bytes(data))


def _cell(column: str, value) -> str:
    if isinstance(value, str):
        return value
    if float(value).is_integer() and column in ("count", "unit", "other_unit", "channel"):
        return str(int(value))
    return "nan" if value != value else format(float(value), ".10g")


def write_table_job(path: Path, table: dict, progress=None, cancel=None) -> Path:
    """Job: write a plot's numbers (see :meth:`PlotTarget.table`) as CSV with described columns."""
    columns = list(table["table"])
    text = [c for c in columns if c in ("histogram", "other_unit")]
    return write_described_csv(path, table["title"], table["meanings"], columns, table["table"], _cell, text)
