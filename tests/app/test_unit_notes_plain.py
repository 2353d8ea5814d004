"""A unit's note is shown literally in the window: never rendered as rich text."""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtGui import QTextDocument

from tests.app.test_units_curation import column
from tests.app.units_helpers import biggest_unit, cluster_demo

NOTE = '<b>x</b><img src="file:///etc/passwd"> & <a href="http://example.com">y</a>\nline two'


def test_note_tooltip_shows_html_like_text_literally(demo_window):
    win = demo_window
    ctl = win.units
    cluster_demo(win)
    u = biggest_unit(ctl)
    assert ctl.set_note(u, NOTE)
    assert win.wait_idle(60)
    model = win.unit_panels["list"].model
    row = model.row_of(u)
    index = model.index(row, column("note"))
    assert model.data(index, Qt.ItemDataRole.DisplayRole) == NOTE
    tip = model.data(index, Qt.ItemDataRole.ToolTipRole)
    doc = QTextDocument()
    doc.setHtml(tip)                       # what a tooltip does with text that looks like HTML
    assert doc.toPlainText() == NOTE


def test_error_boxes_show_their_message_as_plain_text(window):
    box = window.show_error("Cannot write the note", NOTE)
    assert box.textFormat() == Qt.TextFormat.PlainText and box.text() == NOTE
    box.close()
