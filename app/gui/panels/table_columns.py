"""Column widths of the window's tables, fitted to their cells and to the lines of their headers."""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QHeaderView, QTableView

HEADER_PADDING = 14
"""Pixels beside a column's header text (both sides together)."""
ARROW_ROOM = 14
"""Pixels more for the sorted column, whose arrow stands beside its header text."""


def fit_columns(table: QTableView, widest: dict[int, int] | None = None) -> None:
    """Each column as wide as its widest cell or the longest line of its header, the sorted one with
    room for its arrow; ``widest`` caps some columns (column -> pixels; e.g. free text, whole in its
    tooltip). Qt's own fit to contents adds the header's height to every column as room for an
    arrow, which with two-line headers doubles the width of narrow columns. The columns stay
    resizable by hand until the next fit."""
    header = table.horizontalHeader()
    header.setSectionResizeMode(QHeaderView.ResizeMode.Interactive)
    model = table.model()
    fm, sorted_by = header.fontMetrics(), header.sortIndicatorSection()
    for i in range(model.columnCount()):
        title = str(model.headerData(i, Qt.Orientation.Horizontal, Qt.ItemDataRole.DisplayRole) or "")
        text = max(fm.horizontalAdvance(line) for line in title.split("\n")) + HEADER_PADDING
        width = max(table.sizeHintForColumn(i), text + (ARROW_ROOM if i == sorted_by else 0))
        header.resizeSection(i, min(width, (widest or {}).get(i, width)))


def table_width(table: QTableView) -> int:
    """Width (pixels) of ``table`` showing every column without a horizontal scrollbar."""
    return table.horizontalHeader().length() + table.verticalScrollBar().sizeHint().width() + 2 * table.frameWidth()
