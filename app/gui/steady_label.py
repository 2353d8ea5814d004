"""A word-wrapped label whose new texts do not relayout the window while its height stays."""

from __future__ import annotations

from PySide6.QtCore import QEvent, QSize
from PySide6.QtWidgets import QLabel, QSizePolicy, QWidget


class SteadyLabel(QWidget):
    """Holder of a word-wrapped :class:`QLabel` (``.label``) for text that changes often (counts during a drag).

    A label in a layout asks that layout to recompute on every new text, and the request climbs through the
    panel and its dock to the main window's layout: a few milliseconds per text. Here the label has a
    holder without a layout, so its requests stop at the holder, which asks its own layout again only when
    the text's height at the current width differs from the height it last asked for.
    """

    def __init__(self, text: str = "", parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.label = QLabel(text, self)
        self.label.setWordWrap(True)
        policy = QSizePolicy(QSizePolicy.Policy.Preferred, QSizePolicy.Policy.Preferred)
        policy.setHeightForWidth(True)
        self.setSizePolicy(policy)
        self._asked = -1

    def hasHeightForWidth(self) -> bool:
        return True

    def heightForWidth(self, width: int) -> int:
        return self.label.heightForWidth(width)

    def sizeHint(self) -> QSize:
        return self.label.sizeHint()

    def minimumSizeHint(self) -> QSize:
        return self.label.minimumSizeHint()

    def resizeEvent(self, event) -> None:
        self.label.setGeometry(self.rect())
        self._asked = self.heightForWidth(self.width())
        super().resizeEvent(event)

    def event(self, event) -> bool:
        if event.type() == QEvent.Type.LayoutRequest:
            wanted = self.heightForWidth(self.width())
            if wanted != self._asked:
                self._asked = wanted
                self.updateGeometry()
        return super().event(event)
