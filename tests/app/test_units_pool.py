"""The unassigned pool of each group in the unit list: shown, selectable, inspected, moved from."""

from __future__ import annotations

import numpy as np

from rigside.core.units.sorting import NO_UNIT, pool_group, pool_id
from rigside.gui.panels.units import COLUMN_SPECS, POOL_LABEL
from rigside.gui.screenshot import capture, colour_share, pixels
from rigside.gui.sorting_controller import SELECTION_COLOURS
from tests.app.units_helpers import click_data, cluster_demo, rectangle


def column(name: str) -> int:
    return next(i for i, spec in enumerate(COLUMN_SPECS) if spec[1] == name)


def test_unassigned_rows_are_listed_inspected_and_moved_into_a_unit_with_undo(demo_window, qtbot, tmp_path):
    win = demo_window
    ctl = win.units
    cluster_demo(win)
    s = ctl.sorting
    panel = win.unit_panels["list"]
    model = panel.model
    # independent count: events in no unit that are not artefacts, per group
    free = (s.assignments == NO_UNIT) & ~s.data.artefact
    expected = {int(g): int(np.sum(free & (s.data.group == g))) for g in np.unique(s.data.group[free])}
    assert expected, "the demo's first pass leaves some events unassigned (fragment rule)"
    pools = {pool_group(model.unit_at(r)): r for r in range(model.rowCount()) if model.is_pool(r)}
    assert {g: int(model.text(r, column("n_events"))) for g, r in pools.items()} == expected
    for g, r in pools.items():
        assert model.text(r, column("label")) == POOL_LABEL
        assert model.text(r, column("group")) == ctl.group_name(g)
        assert model.text(r, column("isolation_distance")) == "—"
    assert "unassigned" in panel.summary.text()
    # pools sort after the units by the id column
    shown = [panel.proxy.index(r, 0).data() for r in range(panel.proxy.rowCount())]
    assert shown[-len(pools):] == ["·"] * len(pools)
    # select the biggest pool by its row, as a click would
    g = max(expected, key=expected.get)
    view_row = next(r for r in range(panel.proxy.rowCount())
                    if panel.model.unit_at(panel.proxy.mapToSource(panel.proxy.index(r, 0)).row()) == pool_id(g))
    panel.select_rows([view_row])
    assert ctl.selection == [pool_id(g)]
    assert win.wait_idle(60)
    pool = np.flatnonzero(free & (s.data.group == g))
    plane = win.unit_panels["plane"]
    assert plane.group == g and len(plane.unit_items) == 1
    assert len(plane.unit_items[0].data) == len(pool)
    assert f"unassigned in {ctl.group_name(g)}" in plane.status.text()
    waveforms = win.unit_panels["plots"].waveforms
    assert pool_id(g) in waveforms.snippets and len(waveforms.snippets[pool_id(g)][0]) == len(pool)
    win.resize(1600, 1000)
    shot = pixels(capture(win, tmp_path / "pool.png"))      # the pool's events in the first selection colour
    assert colour_share(shot, SELECTION_COLOURS[0], tolerance=30) > 1e-4
    # splitting is for units; a pool's events are chosen by an outline and moved
    assert not plane.start_outline("split")
    xa, ya = plane.axes
    x, y = s.data.axis_values(xa, pool), s.data.axis_values(ya, pool)
    pi = plane.plot.getPlotItem()
    pad_x, pad_y = (np.ptp(x) + 1) * 0.2, (np.ptp(y) + 1) * 0.2
    pi.setXRange(x.min() - 2 * pad_x, x.max() + 2 * pad_x, padding=0)
    pi.setYRange(y.min() - 2 * pad_y, y.max() + 2 * pad_y, padding=0)
    qtbot.wait(20)
    assert plane.start_outline("choose")
    box = rectangle(x.min() - pad_x, x.max() + pad_x, y.min() - pad_y, y.max() + pad_y)
    for vx, vy in box:
        click_data(plane.plot, vx, vy, qtbot)
    click_data(plane.plot, *box[0], qtbot)
    assert not plane.tool.active
    assert np.array_equal(ctl.selected_events, pool)
    # move them into the group's biggest unit through the plane's menu
    counts = s.counts()
    target = max((u for u, rec in s.units.items() if rec.group == g), key=counts.get)
    before = s.assignments.copy()
    plane._fill_move_menu()
    action = next(a for a in plane.move_menu.actions() if a.text().startswith(f"unit {target} "))
    action.trigger()
    assert win.wait_idle(60)
    assert np.array_equal(np.flatnonzero(s.assignments != before), pool)
    assert np.all(s.assignments[pool] == target) and s.counts()[target] == counts[target] + len(pool)
    assert g not in s.pool_counts() and pool_id(g) not in [model.unit_at(r) for r in range(model.rowCount())]
    assert ctl.selection == [target]
    assert s.journal.entries[-1]["action"] == "do"
    assert win.actions_by_name["undo"].text() == f"Undo: Move {len(pool)} events to unit {target}"
    win.actions_by_name["undo"].trigger()
    assert np.array_equal(s.assignments, before)             # bit for bit
    assert s.journal.entries[-1]["action"] == "undo"
    assert int(model.text(model.row_of(pool_id(g)), column("n_events"))) == len(pool)
    # a pool is no unit: unit commands leave it out and say so
    ctl.set_selection([pool_id(g)])
    win.actions_by_name["merge"].trigger()
    assert "unassigned row is no unit" in win.last_error[1]
    assert np.array_equal(s.assignments, before)
    assert win.wait_idle(60)                                # the plots' redraws end before the window closes
