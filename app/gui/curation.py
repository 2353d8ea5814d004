"""Curation in the window: Qt undo commands over the core operations, and a polygon tool.

:class:`StepCommand` binds one :mod:`rigside.core.units.operations` step to Qt's undo stack through the
core stack's primitives (``apply`` on the first redo, ``reapply`` on later redos, ``revert``
on undo), so the journal records every do, undo and redo. :class:`PolygonTool` lets the
user outline a region on any pyqtgraph plot, one click per vertex; the finished outline is
one curation step, however many clicks it took.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QObject, Qt, Signal
from PySide6.QtGui import QUndoCommand

from rigside.core.units.history import UndoStack
from rigside.gui import palette

CLOSE_PIXELS = 10
"""A click this close (screen pixels) to the first vertex closes the outline."""


class StepCommand(QUndoCommand):
    """One curation step on Qt's undo stack; its menu text comes from the operation."""

    def __init__(self, op, stack: UndoStack, applied: bool = False):
        """``applied``: the step is already in the sorting (history rebuilt from the journal), so
        the push that puts it on the stack does not apply it again."""
        super().__init__(op.text)
        self.op = op
        self._stack = stack
        self._done_once = applied
        self._skip_push = applied

    def redo(self) -> None:
        if self._skip_push:
            self._skip_push = False
        elif self._done_once:
            self._stack.reapply(self.op)
        else:
            self._stack.apply(self.op)
            self._done_once = True

    def undo(self) -> None:
        self._stack.revert(self.op)


class PolygonTool(QObject):
    """Click vertices on a plot; close the outline on the first vertex or by a double click.

    Signals: ``finished(vertices)`` with an (n, 2) array in data coordinates, ``cancelled()``
    (right click, or :meth:`cancel`), ``changed()`` when a vertex is added.
    """

    finished = Signal(object)
    cancelled = Signal()
    changed = Signal()

    def __init__(self, plot: pg.PlotItem, colour=palette.BLACK):
        super().__init__(plot)
        self.plot = plot
        self.active = False
        self.purpose = ""
        self.vertices: list[tuple[float, float]] = []
        self.outline = pg.PlotDataItem(pen=palette.pen(colour, 1.5, dash=True), symbol="o", symbolSize=6,
                                       symbolBrush=pg.mkBrush(*colour[:3]), symbolPen=None)
        self.outline.setZValue(50)
        self.outline.setVisible(False)
        plot.addItem(self.outline, ignoreBounds=True)
        plot.scene().sigMouseClicked.connect(self._clicked)

    def start(self, purpose: str = "") -> None:
        """Begin a new outline (``purpose`` is kept for whoever receives the result)."""
        self.vertices = []
        self.purpose = purpose
        self.active = True
        self.outline.setData([], [])
        self.outline.setVisible(True)
        self.plot.getViewBox().setCursor(Qt.CursorShape.CrossCursor)

    def add_vertex(self, x: float, y: float) -> None:
        """Add one vertex in data coordinates (what a left click does)."""
        if not self.active:
            return
        self.vertices.append((float(x), float(y)))
        pts = np.asarray(self.vertices)
        self.outline.setData(pts[:, 0], pts[:, 1])
        self.changed.emit()

    def finish(self) -> None:
        """Close the outline and emit it (at least three vertices; otherwise cancel)."""
        if not self.active:
            return
        if len(self.vertices) < 3:
            self.cancel()
            return
        pts = np.asarray(self.vertices, dtype=np.float64)
        self._stop()
        self.finished.emit(pts)

    def cancel(self) -> None:
        if self.active:
            self._stop()
            self.cancelled.emit()

    def _stop(self) -> None:
        self.active = False
        self.outline.setVisible(False)
        self.plot.getViewBox().unsetCursor()

    def _clicked(self, event) -> None:
        if not self.active:
            return
        vb = self.plot.getViewBox()
        if not vb.sceneBoundingRect().contains(event.scenePos()):
            return
        event.accept()
        if event.button() == Qt.MouseButton.RightButton:
            self.cancel()
            return
        if event.button() != Qt.MouseButton.LeftButton:
            return
        if event.double():
            self.finish()
            return
        if len(self.vertices) >= 3:
            first = vb.mapViewToScene(pg.Point(*self.vertices[0]))
            if (first - event.scenePos()).manhattanLength() <= CLOSE_PIXELS:
                self.finish()
                return
        p = vb.mapSceneToView(event.scenePos())
        self.add_vertex(p.x(), p.y())
