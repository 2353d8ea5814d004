"""Driving the real window: threshold handle, units, counts and markers against the core."""

from __future__ import annotations

import numpy as np

from tests.app.conftest import visible_passing_times


def drag_handle(win, k_sigma: float, finish: bool = True) -> None:
    """Move the trace view's threshold handle as a mouse drag would."""
    h = win.traces.handle
    h.setValue(win.traces.handle_y(k_sigma))
    if finish:
        h.sigPositionChangeFinished.emit(h)


def test_open_demo_runs_the_real_pipeline(window, qtbot):
    assert window.open_demo()
    assert window.wait_idle(120)
    b = window.bench
    assert window.analysis_outcome == "done"
    assert b.events is not None and len(b.events) > 0
    assert b.analysis.features is not None and len(b.analysis.features.values) == len(b.events)
    x, y = window.traces.curve.getData()
    assert x is not None and len(x) > 100 and np.all(np.isfinite(y))
    # the demo carries ground truth: the teaching plot is shown with hits at the threshold
    curve = window.panels["count_curve"]
    assert curve.scores is not None and curve.truth_plot.isVisible()
    assert curve.scores.hits.max() > 0
    assert str(window.recent_files()[0]).endswith("demo.bin")


def test_dragging_the_handle_updates_counts_and_markers(demo_window):
    win = demo_window
    b, ev = win.bench, win.bench.events
    for k in (5.5, 3.4, 8.0):
        drag_handle(win, k)
        np.testing.assert_allclose(b.thresholds_sigma, k, rtol=1e-9)
        expected = ev.counts(threshold_sigma=k)
        c = b.channel
        assert f"<b>{int(expected[c]):,}</b> events" in win.panels["threshold"].summary.text()
        table = win.panels["threshold"].table_model
        assert [table.data(table.index(r, 5)) for r in range(ev.n_channels)] == \
               [f"{int(n):,}" for n in expected]
        np.testing.assert_allclose(np.sort(win.traces.marker_times()),
                                   np.sort(visible_passing_times(win, k)))
        line = win.panels["count_curve"].line
        assert abs(line.value() - k) < 1e-9


def test_preview_during_a_drag_then_commit(demo_window, qtbot):
    win = demo_window
    committed = []
    win.bench.thresholds_changed.connect(committed.append)
    drag_handle(win, 6.0, finish=False)
    assert committed and committed[-1] is False
    assert len(win.traces.marker_times()) == len(visible_passing_times(win, 6.0))
    drag_handle(win, 6.0, finish=True)
    assert committed[-1] is True


def test_switching_to_microvolts_and_per_channel(demo_window, qtbot):
    win = demo_window
    b, ev = win.bench, win.bench.events
    panel = win.panels["threshold"]
    k_before = float(b.thresholds_sigma[b.channel])
    panel.unit.setCurrentIndex(panel.unit.findData("uv"))
    assert b.unit == "uv"
    # switching the unit changes how values are shown, not the thresholds
    assert abs(panel.value.value() - k_before * ev.sigma_uv[b.channel]) < 0.06
    assert panel.value.suffix() == " µV"
    panel.value.setValue(40.0)
    expected = ev.counts(threshold_uv=40.0)
    np.testing.assert_array_equal(b.counts(), expected)
    np.testing.assert_allclose(b.thresholds_sigma * ev.sigma_uv, 40.0)
    # per channel: only the selected channel moves
    panel.scope.setCurrentIndex(panel.scope.findData("channel"))
    b.select_channel(2)
    before = b.thresholds_sigma.copy()
    panel.value.setValue(55.0)
    changed = np.flatnonzero(b.thresholds_sigma != before)
    assert changed.tolist() == [2]
    assert abs(b.thresholds_sigma[2] * ev.sigma_uv[2] - 55.0) < 1e-9
    assert int(b.counts()[2]) == int(ev.counts(threshold_uv=55.0)[2])
    # a drag of the count-curve line in microvolts sets the same channel
    line = win.panels["count_curve"].line
    line.setValue(70.0)
    line.sigPositionChangeFinished.emit(line)
    assert abs(b.thresholds_sigma[2] * ev.sigma_uv[2] - 70.0) < 1e-6
    # back to sigma: the field shows sigma multiples of the selected channel
    panel.unit.setCurrentIndex(panel.unit.findData("sigma"))
    assert abs(panel.value.value() - b.thresholds_sigma[2]) < 0.006


def test_thousands_of_threshold_moves(demo_window):
    """Regression guard: PySide6 6.12.0 crashed after a few thousand Qt calls."""
    win = demo_window
    ev = win.bench.events
    ks = 3.2 + 4.0 * (0.5 + 0.5 * np.sin(np.arange(3000) * 0.01))
    for i, k in enumerate(ks):
        drag_handle(win, float(k), finish=(i % 100 == 99))
    drag_handle(win, 4.7)
    c = win.bench.channel
    assert f"<b>{int(ev.counts(threshold_sigma=4.7)[c]):,}</b> events" in win.panels["threshold"].summary.text()
    assert len(win.traces.marker_times()) == len(visible_passing_times(win, 4.7))


def test_keys_move_threshold_group_and_view(demo_window, qtbot):
    win = demo_window
    b = win.bench
    k0 = float(b.thresholds_sigma[b.channel])
    win.actions_by_name["stricter"].trigger()
    assert abs(b.thresholds_sigma[b.channel] - (k0 + 0.1)) < 1e-9
    win.actions_by_name["looser"].trigger()
    win.actions_by_name["looser"].trigger()
    assert abs(b.thresholds_sigma[b.channel] - (k0 - 0.1)) < 1e-9
    g0 = b.group
    win.actions_by_name["next_group"].trigger()
    assert b.group == (g0 + 1) % len(b.recording.groups)
    assert b.shown_channels.tolist() == b.recording.groups[b.group].tolist()
    win.actions_by_name["previous_group"].trigger()
    assert b.group == g0
    t0, t1 = b.view
    win.actions_by_name["zoom_in"].trigger()
    assert b.view[1] - b.view[0] < t1 - t0
    win.actions_by_name["later"].trigger()
    assert b.view[0] > t0
    dialog = win.shortcuts_dialog if hasattr(win, "shortcuts_dialog") else None
    win.actions_by_name["shortcuts"].trigger()
    rows = dict(win.shortcuts_dialog.rows())
    assert rows["Next channel group"] == "], PgDown"
    assert rows["Raise the threshold (stricter)"] == "Ctrl+Up"
    assert dialog is None
    win.shortcuts_dialog.close()


def test_below_the_floor_offers_detection_again(demo_window):
    win = demo_window
    ev = win.bench.events
    win.bench.set_threshold(ev.floor_sigma - 0.5)
    assert win.bench.below_floor()
    panel = win.panels["threshold"]
    assert not panel.redetect.isHidden()
    assert "below the stored floor" in panel.summary.text()
