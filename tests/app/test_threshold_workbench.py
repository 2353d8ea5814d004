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
    assert x is not None and len(x) > 100 and np.all(np.isfinite(y[np.isfinite(x)]))
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
    panel.scale.setCurrentIndex(panel.scale.findData("uv"))
    assert b.scale == "uv"
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
    panel.scale.setCurrentIndex(panel.scale.findData("sigma"))
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


def test_below_the_floor_offers_detection_again(demo_window, monkeypatch):
    win = demo_window
    ev = win.bench.events
    win.bench.set_threshold(ev.floor_sigma - 0.5)
    assert win.bench.below_floor()
    panel = win.panels["threshold"]
    assert not panel.redetect.isHidden()
    assert "below the stored floor" in panel.summary.text()
    monkeypatch.undo()  # the real detection from here on
    panel.redetect.click()
    assert win.wait_idle(120)
    new = win.bench.events
    assert new is not ev and abs(new.floor_sigma - (ev.floor_sigma - 0.5)) < 1e-9
    assert not win.bench.below_floor() and panel.redetect.isHidden()
    # the stored events above the old floor are the same events (a look-up, not a new definition)
    np.testing.assert_array_equal(new.counts(threshold_sigma=ev.floor_sigma), ev.counts(threshold_sigma=ev.floor_sigma))
    c = win.bench.channel
    assert f"<b>{int(new.counts(threshold_sigma=ev.floor_sigma - 0.5)[c]):,}</b> events" in panel.summary.text()


def test_raw_view_hides_threshold_drawing_and_rescales(demo_window):
    win = demo_window
    traces = win.traces
    filtered_spacing = traces.spacing
    win.actions_by_name["raw"].trigger()
    assert win.bench.show_raw and traces.raw_box.isChecked()
    assert traces.block.raw and not traces.handle.isVisible()
    x, _ = traces.threshold_lines.getData()
    assert x is None or len(x) == 0
    assert traces.spacing != filtered_spacing
    x, y = traces.curve.getData()
    assert np.all(np.isfinite(y[np.isfinite(x)]))
    win.actions_by_name["raw"].trigger()
    assert traces.handle.isVisible() and abs(traces.spacing - filtered_spacing) < 1e-9
    win.actions_by_name["taller"].trigger()
    assert traces.spacing < filtered_spacing


def test_a_threshold_above_every_event_empties_the_views(demo_window):
    win = demo_window
    win.bench.set_threshold(90.0)
    assert win.wait_idle(30)
    assert len(win.traces.marker_times()) == 0
    assert int(win.bench.counts().sum()) == 0
    assert "no events at this threshold" in win.panels["waveforms"].status.text()
    assert win.panels["features"].n_shown == 0


def test_scrolling_reads_only_around_the_visible_window(demo_window, monkeypatch):
    win = demo_window
    rec = win.bench.recording
    spans = []
    original = rec.read_stored

    def logged(start, stop, channels=None):
        spans.append((start, stop))
        return original(start, stop, channels)

    monkeypatch.setattr(rec, "read_stored", logged)
    width = 0.1
    for i in range(40):
        t0 = 0.5 + i * width / 4
        win.bench.set_view(t0, t0 + width)
    last = t0 + width
    assert win.wait_idle(30)
    assert spans, "scrolling must read new samples"
    margin = win.traces.source.bandpass.margin
    longest = max(b - a for a, b in spans)
    # the visible window plus one window on each side, the filter's margins and run alignment
    assert longest <= 3 * width * rec.rate_hz + 2 * margin + 64
    # nothing far from the stretch scrolled over was read
    assert min(a for a, _ in spans) >= (0.5 - width) * rec.rate_hz - margin - 64
    assert max(b for _, b in spans) <= (last + 2 * width) * rec.rate_hz + margin + 64
