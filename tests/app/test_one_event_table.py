"""One event table in the window: the session's events are rows of the workbench's table, found again when that
table is replaced; and the unit list shows every column. Oracle: the events' sample and channel (an event's identity
in a recording; common practice, no source) and the header texts' own widths."""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import Qt

from rigside.core.units.event_rows import MISSING
from rigside.gui.panels.table_columns import HEADER_PADDING
from rigside.gui.panels.units import COLUMN_SPECS
from tests.app.units_helpers import biggest_unit, cluster_demo


def _same_events(a, rows_a, b, rows_b) -> bool:
    return (np.array_equal(a.sample[rows_a], b.sample[rows_b])
            and np.array_equal(a.channel[rows_a], b.channel[rows_b]))


def test_selected_units_are_rows_of_the_workbench_table_also_after_it_is_replaced(demo_window):
    win = demo_window
    ctl, bench = win.units, win.bench
    cluster_demo(win)
    table, session = bench.events, ctl.session
    assert ctl.holds_rows and ctl.holds_detection(ctl.current_detection())
    assert _same_events(table, ctl.rows, session.events, np.arange(len(session.events)))
    unit = biggest_unit(ctl)
    ctl.set_selection([unit])
    mine = ctl.sorting.events_of(unit)
    np.testing.assert_array_equal(ctl.selected_rows()[unit], np.sort(ctl.rows[mine]))

    # a new table of the same recording without a fifth of its rows (as a detection at other settings would be)
    announced = []
    ctl.rows_changed.connect(lambda: announced.append(True))
    kept = np.flatnonzero(np.random.default_rng(0).random(len(table)) >= 0.2)
    fewer = table.subset(kept)
    bench.set_events(bench.analysis.noise, fewer)
    assert announced and ctl.session is session and not ctl.holds_rows
    found = ctl.rows != MISSING
    assert found.any() and not found.all()
    assert _same_events(fewer, ctl.rows[found], session.events, np.flatnonzero(found))
    held = set(zip(fewer.sample.tolist(), fewer.channel.tolist()))
    ev = session.events
    assert not any((int(ev.sample[i]), int(ev.channel[i])) in held for i in np.flatnonzero(~found))
    expected = np.sort(ctl.rows[mine][ctl.rows[mine] != MISSING])
    np.testing.assert_array_equal(ctl.selected_rows()[unit], expected)
    marks = win.traces.marks.highlights                     # the trace view marks the new table's rows
    assert len(marks) == 1 and np.array_equal(marks[0][0], expected)


def test_the_unit_list_shows_every_column_whole(demo_window):
    win = demo_window
    win.resize(1920, 1120)
    cluster_demo(win)
    panel = win.unit_panels["list"]
    table, header = panel.table, panel.table.horizontalHeader()
    fm = header.fontMetrics()
    for i, spec in enumerate(COLUMN_SPECS[:-1]):              # the note column is capped; its tooltip has it all
        text = max(fm.horizontalAdvance(line) for line in spec[0].split("\n"))
        assert header.sectionSize(i) >= max(text + HEADER_PADDING, table.sizeHintForColumn(i)), spec[0]
    win.wait_idle(30)
    assert header.length() <= table.viewport().width() and not table.horizontalScrollBar().isVisible()
    header.setSortIndicator(0, Qt.SortOrder.DescendingOrder)   # sorting keeps the columns whole
    assert header.sectionSize(0) >= fm.horizontalAdvance("unit") + HEADER_PADDING
