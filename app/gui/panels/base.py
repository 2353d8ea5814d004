"""What every panel shares: the workbench state and the job runner.

The window places each panel in a dock named after ``panel_id``; later panels subclass
:class:`Panel` and are added with ``MainWindow.add_panel``.
"""

from __future__ import annotations

from typing import Callable

import numpy as np
from PySide6.QtWidgets import QWidget

from rigside.gui.model import Workbench
from rigside.gui.workers import Runner


class Panel(QWidget):
    """A dockable view of the workbench."""

    panel_id = "panel"
    title = "Panel"

    def __init__(self, bench: Workbench, runner: Runner, parent: QWidget | None = None):
        super().__init__(parent)
        self.setObjectName(self.panel_id)
        self.bench = bench
        self.runner = runner
        self._pending_draw: Callable[[], None] | None = None

    def when_shown(self, draw: Callable[[], None]) -> None:
        """Run ``draw`` now while the panel is in view, else when it next comes into view (a panel in a
        hidden tab draws nothing meanwhile; the latest drawing asked for is the one done)."""
        if self.isVisible():
            self._pending_draw = None
            draw()
        else:
            self._pending_draw = draw

    def showEvent(self, event) -> None:
        super().showEvent(event)
        draw, self._pending_draw = self._pending_draw, None
        if draw is not None:
            draw()


def highlight_sets(rows_and_colours) -> list[tuple[np.ndarray, tuple]]:
    """Highlighted event sets as panels keep them: ``(rows as int64, colour)`` per set."""
    return [(np.asarray(r, dtype=np.int64), c) for r, c in rows_and_colours]


def same_highlights(a: list[tuple[np.ndarray, tuple]], b: list[tuple[np.ndarray, tuple]]) -> bool:
    """True when two lists of highlighted sets hold the same rows in the same colours (nothing to redraw)."""
    return len(a) == len(b) and all(ca == cb and np.array_equal(ra, rb) for (ra, ca), (rb, cb) in zip(a, b))
