"""Units in the real window: first pass, the unit list, outline split, undo/redo, merge, labels, moves."""

from __future__ import annotations

import math

import numpy as np
from PySide6.QtCore import Qt
from PySide6.QtGui import QKeySequence
from PySide6.QtWidgets import QMenu

from rigside.core.quality.unit_table_io import DEFAULT_LIMITS, Limit
from rigside.core.units.sorting import AXIS_AMPLITUDE, AXIS_TIME, LABELS, NO_UNIT
from rigside.gui.dialogs.unit_dialogs import ClusterDialog, LimitsDialog, PartsDialog, spin_count
from rigside.gui.panels.units import COLUMN_SPECS
from rigside.gui.units_frame import LABEL_KEYS, label_action_name
from rigside.gui.window_actions import show_shortcuts
from tests.app.units_helpers import biggest_unit, click_data, cluster_demo, rectangle


def column(name: str) -> int:
    return next(i for i, spec in enumerate(COLUMN_SPECS) if spec[1] == name)


def list_units(win) -> list[int]:
    model = win.unit_panels["list"].model
    return [model.unit_at(r) for r in range(model.rowCount()) if not model.is_pool(r)]


def test_first_pass_fills_the_unit_list_with_quality_numbers_and_marks(demo_window):
    win = demo_window
    ctl = win.units
    cluster_demo(win)
    s = ctl.sorting
    assert sorted(list_units(win)) == s.unit_ids() and len(s.units) >= 4
    assert set(ctl.metrics) == {u for u, n in s.counts().items() if n > 0}
    assert all(rec.label == "unreviewed" for rec in s.units.values())
    # every event at the window's threshold is in the sorting; artefacts are in no unit
    ev = win.bench.events
    keep = ev.mask(threshold_sigma=win.bench.thresholds_sigma, include_artefacts=True)
    assert len(s.data) == int(keep.sum())
    assert np.all(s.assignments[s.data.artefact] == NO_UNIT)
    model = win.unit_panels["list"].model
    for r in [r for r in range(model.rowCount()) if not model.is_pool(r)]:
        u = model.unit_at(r)
        m = ctl.metrics[u]
        assert model.text(r, column("n_events")) == str(s.counts()[u])
        for lim in DEFAULT_LIMITS:
            value = float(m[lim.column])
            beyond = math.isfinite(value) and (value > lim.value if lim.kind == "max" else value < lim.value)
            text = model.text(r, column(lim.column))
            assert text.startswith("! ") == beyond, (u, lim.name, text)
            if not math.isfinite(value):   # undefined numbers show a dash and their reason
                assert text == "—"
                reason = m[lim.column + "_reason"] if lim.column + "_reason" in m else ""
                assert reason == "" or reason in model._tooltip(r, lim.column)
    assert "estimates" in win.unit_panels["list"].caution.text()
    # limits are configurable: a demanding SNR limit marks every unit with an SNR
    ctl.limits = [Limit("snr", "min", 1000.0)]
    ctl.metrics_changed.emit()
    snr = [model.text(r, column("snr")) for r in range(model.rowCount())]
    assert all(t.startswith("! ") for t in snr if t != "—") and not all(t == "—" for t in snr)
    ctl.limits = list(DEFAULT_LIMITS)
    # an undefined number is its own state: never marked, its tooltip gives the reason
    u0 = model.unit_at(0)
    saved = dict(ctl.metrics[u0])
    ctl.metrics[u0].update(isolation_distance=math.nan, isolation_distance_reason="too few events")
    ctl.metrics_changed.emit()
    r0 = model.row_of(u0)
    tip = model._tooltip(r0, "isolation_distance")
    assert model.text(r0, column("isolation_distance")) == "—"
    assert "undefined: too few events" in tip and "not checked against the limit isolation_distance < 20" in tip
    assert "beyond" not in tip and "within" not in tip
    ctl.metrics[u0] = saved
    ctl.metrics_changed.emit()
    # sorting by a number puts undefined values last, in both directions
    panel = win.unit_panels["list"]
    c = column("isolation_distance")
    for order in (Qt.SortOrder.AscendingOrder, Qt.SortOrder.DescendingOrder):
        panel.table.sortByColumn(c, order)
        texts = [panel.proxy.index(r, c).data() for r in range(panel.proxy.rowCount())]
        dashes = [t == "—" for t in texts]
        assert dashes == sorted(dashes)


def test_outline_split_in_the_cluster_plane_with_undo_and_redo(demo_window, qtbot):
    win = demo_window
    ctl = win.units
    cluster_demo(win)
    unit = biggest_unit(ctl)
    panel = win.unit_panels["list"]
    panel.select_rows([list_units(win).index(unit)])
    assert ctl.selection == [unit]
    plane = win.unit_panels["plane"]
    plane.set_axes(AXIS_TIME, AXIS_AMPLITUDE)           # amplitude over time is one plane
    s = ctl.sorting
    idx = s.events_of(unit)
    t, a = s.data.time_s[idx], s.data.amplitude_uv[idx].astype(np.float64)
    half = float(np.median(t))
    pi = plane.plot.getPlotItem()
    pi.setXRange(-0.2, win.bench.events.duration_s, padding=0)
    pi.setYRange(a.min() - 20, a.max() + 20, padding=0)
    qtbot.wait(20)
    before = s.assignments.copy()
    n_units = len(s.units)
    # the outline: a rectangle over the first half of the recording, closed on its first vertex
    win.actions_by_name["split_outline"].trigger()
    assert plane.tool.active
    box = rectangle(-0.01, half, a.min() - 10, a.max() + 10)
    for x, y in box:
        click_data(plane.plot, x, y, qtbot)
    assert len(plane.tool.vertices) == 4
    click_data(plane.plot, *box[0], qtbot)
    assert not plane.tool.active
    win.wait_idle(30)
    assert len(s.units) == n_units + 1
    new = max(s.units)
    # independent check: the events before the drawn time edge left the unit (the edge was
    # placed by a click, so allow the events within one pixel of it to go either way)
    moved = np.flatnonzero(s.assignments != before)
    assert np.all(before[moved] == unit) and np.all(s.assignments[moved] == new)
    px = (win.bench.events.duration_s + 0.2) / plane.plot.getPlotItem().getViewBox().width()
    assert np.all(s.data.time_s[moved] < half + 2 * px)
    assert np.sum(t < half - 2 * px) <= len(moved) <= np.sum(t < half + 2 * px)
    assert new in list_units(win) and ctl.selection == [unit, new]
    undo, redo = win.actions_by_name["undo"], win.actions_by_name["redo"]
    assert undo.text() == f"Undo: Split unit {unit} by polygon" and undo.isEnabled()
    assert QKeySequence(QKeySequence.StandardKey.Undo) in undo.shortcuts()
    assert QKeySequence(QKeySequence.StandardKey.Redo) in redo.shortcuts()
    after = s.assignments.copy()
    undo.trigger()
    assert np.array_equal(s.assignments, before) and new not in list_units(win)
    assert redo.text() == f"Redo: Split unit {unit} by polygon"
    redo.trigger()
    assert np.array_equal(s.assignments, after) and new in list_units(win)
    actions = [e["action"] for e in s.journal.entries]
    assert actions[-3:] == ["do", "undo", "redo"]
    win.wait_idle(30)
    assert new in ctl.metrics and ctl.metrics[new]["n_events"] == len(moved)


def test_merge_relabel_note_and_move_events(demo_window, qtbot):
    win = demo_window
    ctl = win.units
    cluster_demo(win)
    s = ctl.sorting
    by_group: dict[int, list[int]] = {}
    for u, rec in s.units.items():
        by_group.setdefault(rec.group, []).append(u)
    pair = next(us[:2] for us in by_group.values() if len(us) >= 2)
    counts = s.counts()
    ctl.set_selection(pair)
    win.actions_by_name["merge"].trigger()
    assert pair[1] not in s.units and s.counts()[pair[0]] == counts[pair[0]] + counts[pair[1]]
    assert pair[1] not in list_units(win)
    win.actions_by_name["undo"].trigger()
    assert s.counts()[pair[0]] == counts[pair[0]] and pair[1] in s.units
    # labels through the Label menu, exactly the four allowed labels
    model = win.unit_panels["list"].model
    ctl.set_selection([pair[0]])
    assert LABELS[0] == "unreviewed" and s.unit(pair[0]).label == "unreviewed"
    for label in LABELS[1:] + LABELS[:1]:          # each label differs from the one before
        win.actions_by_name[label_action_name(label)].trigger()
        assert s.unit(pair[0]).label == label
        assert model.text(model.row_of(pair[0]), column("label")) == label
    assert ctl.set_note(pair[0], "fires in bursts")
    assert model.text(model.row_of(pair[0]), column("note")) == "fires in bursts"
    # choosing events by an outline, then moving them to a new unit and back to no unit
    ctl.set_selection([pair[0]])
    plane = win.unit_panels["plane"]
    xa, ya = plane.axes
    idx = s.events_of(pair[0])
    x, y = s.data.axis_values(xa, idx), s.data.axis_values(ya, idx)
    assert plane.start_outline("choose")
    mid = float(np.median(x))
    for vx, vy in rectangle(x.min() - 1, mid, y.min() - 1, y.max() + 1):
        plane.tool.add_vertex(vx, vy)
    plane.tool.finish()
    expected = idx[x < mid]
    assert np.array_equal(ctl.selected_events, expected)
    assert len(plane.chosen.data) == len(expected)
    n_units = len(s.units)
    assert ctl.move_events(None)
    new = max(s.units)
    assert len(s.units) == n_units + 1 and np.array_equal(s.events_of(new), expected)
    assert win.actions_by_name["undo"].text() == f"Undo: Move {len(expected)} events to a new unit"
    win.actions_by_name["undo"].trigger()
    assert new not in s.units
    # a refused step says why and changes nothing
    state = s.assignments.copy()
    other_group = next(us[0] for g, us in by_group.items() if g != s.unit(pair[0]).group)
    assert not ctl.merge([pair[0], other_group])
    assert "one channel group" in win.last_error[1]
    assert np.array_equal(s.assignments, state)


def test_recluster_one_unit_off_the_gui_thread(demo_window):
    win = demo_window
    ctl = win.units
    cluster_demo(win)
    s = ctl.sorting
    unit = biggest_unit(ctl)
    n = len(s.units)
    before = s.assignments.copy()
    assert ctl.recluster(unit, 2)
    assert win.wait_idle(60)
    assert len(s.units) == n + 1
    new = max(s.units)
    assert set(np.unique(s.assignments[before == unit])) == {unit, new}
    assert ctl.selection == [unit, new]
    ctl.undo()
    assert np.array_equal(s.assignments, before)
    # clustering the same detection again is one undoable step too
    assert ctl.cluster(k=2)
    assert win.wait_idle(60)
    assert all(n_events > 0 for n_events in s.counts().values())
    assert win.actions_by_name["undo"].text() == "Undo: First-pass clustering"
    ctl.undo()
    assert np.array_equal(s.assignments, before)


def test_unit_dialogs_return_what_was_entered(qtbot):
    limits = LimitsDialog(list(DEFAULT_LIMITS))
    qtbot.addWidget(limits)
    limits.spins[0].setValue(0.2)
    assert limits.values()[0] == Limit(DEFAULT_LIMITS[0].column, DEFAULT_LIMITS[0].kind, 0.2)
    assert limits.values()[1:] == list(DEFAULT_LIMITS[1:])
    cluster = ClusterDialog("bundle A", can_limit=False)
    qtbot.addWidget(cluster)
    assert spin_count(cluster.k) is None and cluster.k.text() == "automatic (BIC)"
    cluster.k.setValue(3)
    assert spin_count(cluster.k) == 3 and not cluster.only_group.isEnabled()
    parts = PartsDialog(7)
    qtbot.addWidget(parts)
    assert spin_count(parts.k) is None
    parts.k.setValue(2)
    assert spin_count(parts.k) == 2


def test_selected_units_are_coloured_in_the_feature_and_trace_views(demo_window):
    win = demo_window
    ctl = win.units
    cluster_demo(win)
    shown_group = int(win.bench.recording.channel_group[win.bench.channel])
    counts = ctl.sorting.counts()
    u = max((v for v, rec in ctl.sorting.units.items() if rec.group == shown_group), key=counts.get)
    ctl.set_selection([u])
    feats = win.panels["features"]
    rows = ctl.selected_rows()[u]
    # the highlighted points are the unit's events shown in the panel (its group, at the threshold)
    ev = win.bench.events
    visible = rows[(ev.group[rows] == shown_group) & win.bench.mask()[rows]]
    (chosen,) = feats.chosen            # one item for the one selected unit, in its colour
    x, y = chosen.getData()
    assert len(x) == len(visible) > 0
    np.testing.assert_allclose(np.sort(x), np.sort(feats.column(feats.x_combo.currentText())[visible]))
    colour = chosen.opts["brush"].color()
    assert (colour.red(), colour.green(), colour.blue()) == tuple(ctl.unit_colour(u)[:3])
    # the trace view marks the unit's events inside the visible window, in the same colour
    marks = win.traces.marks
    a, z = win.traces.visible_samples()
    in_view = rows[(ev.sample[rows] >= a) & (ev.sample[rows] < z) & (win.traces.lane[ev.channel[rows]] >= 0)]
    tx, _ = marks.chosen.getData()
    np.testing.assert_allclose(np.sort(tx), np.sort(ev.sample[in_view] / ev.rate_hz))
    assert len(tx) > 0
    c = marks.chosen.data["brush"][0].color()
    assert (c.red(), c.green(), c.blue()) == tuple(ctl.unit_colour(u)[:3])
    ctl.set_selection([])
    assert feats.chosen == [] and len(marks.chosen.getData()[0]) == 0


def test_number_keys_label_the_selected_units_while_the_unit_list_has_focus(demo_window, qtbot):
    win = demo_window
    ctl = win.units
    cluster_demo(win)
    s = ctl.sorting
    unit = s.unit_ids()[0]
    ctl.set_selection([unit])
    table = win.unit_panels["list"].table
    win.activateWindow()
    win.traces.setFocus()
    qtbot.waitUntil(lambda: win.traces.hasFocus())
    qtbot.keyClick(win.traces, Qt.Key.Key_1)       # elsewhere in the window a number key labels nothing
    assert s.unit(unit).label == "unreviewed"
    table.setFocus()
    qtbot.waitUntil(lambda: table.hasFocus())
    for key, label in [("1", "single unit"), ("3", "not neural"), ("2", "multi-unit"), ("0", "unreviewed")]:
        qtbot.keyClick(table, key)
        assert s.unit(unit).label == label
    assert LABEL_KEYS == ("0", "1", "2", "3")
    label_menu = next(m for m in win.findChildren(QMenu) if m.title() == "&Label")
    assert [a.text() for a in label_menu.actions()] == [f"Label as {label}" for label in LABELS]
    rows = dict(show_shortcuts(win).rows())
    for key, label in zip(LABEL_KEYS, LABELS):
        assert rows[f"Label as {label}"] == f"{key} (in the unit list)"
    assert not any("Alt+" in keys and "Label" in name for name, keys in rows.items())
    win.shortcuts_dialog.close()
