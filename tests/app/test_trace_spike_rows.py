"""Spike rows on the trace view: only the spikes of the visible window are drawn, they follow
scrolling and zooming, rows of different owners stack, and clearing removes them."""

from __future__ import annotations

import numpy as np
import pytest

from rigside.gui import palette


def expected(times: np.ndarray, flags: np.ndarray, t0: float, t1: float) -> tuple[np.ndarray, np.ndarray]:
    inside = (times >= t0) & (times < t1)
    return times[inside & ~flags], times[inside & flags]


def check_drawn(traces, key: str, rows) -> None:
    t0, t1 = traces.bench.view
    drawn = traces.rows.drawn(key)
    assert len(drawn) == len(rows)
    for (ticks, marks), (_, times, flags, _, _) in zip(drawn, rows):
        want_ticks, want_marks = expected(np.sort(times), np.zeros(len(times), bool) if flags is None
                                          else np.asarray(flags)[np.argsort(times, kind="stable")], t0, t1)
        np.testing.assert_array_equal(ticks, want_ticks)
        np.testing.assert_array_equal(marks, want_marks)


def axis_labels(traces) -> list[str]:
    return [label for _, label in traces.plot.getPlotItem().getAxis("left")._tickLevels[0]]


def test_rows_show_the_spikes_in_view_follow_the_view_and_clear(demo_window):
    win = demo_window
    traces, bench = win.traces, win.bench
    duration = bench.recording.duration_s
    rng = np.random.default_rng(3)
    times = np.sort(rng.uniform(0, duration, 400))
    flags = rng.random(400) < 0.2
    other = np.sort(rng.uniform(0, duration, 150))
    rows = [("imported 4", times, flags, palette.BLUE, "x"), ("fresh 2", other, None, palette.ORANGE, "t")]
    bench.set_view(0.5, 1.0)
    y_before = traces.vb.viewRange()[1]
    labels_before = axis_labels(traces)
    items_before = len(traces.plot.getPlotItem().items)

    traces.set_spike_rows("audit", rows)
    check_drawn(traces, "audit", rows)
    assert 0 < len(traces.rows.drawn("audit")[0][0]) < len(times)      # a slice, not everything
    y_after = traces.vb.viewRange()[1]
    assert y_after[0] == pytest.approx(y_before[0]) and y_after[1] > y_before[1]   # a band above the lanes
    assert axis_labels(traces) == labels_before + ["imported 4", "fresh 2"]
    top, below = traces.rows.centres()
    assert y_before[1] < below < top < y_after[1]

    for view in ((2.0, 2.3), (0.0, duration), (3.1, 3.101)):           # scroll, zoom out, zoom far in
        bench.set_view(*view)
        check_drawn(traces, "audit", rows)
    traces.vb.setXRange(1.2, 1.7, padding=0)                            # a drag of the view itself
    assert bench.view == pytest.approx((1.2, 1.7))
    check_drawn(traces, "audit", rows)

    # a second owner's row stacks below; new rows of the first replace the old ones in place
    extra = [("check", np.array([1.3, 1.5]), np.array([True, False]), palette.GREEN, "s")]
    traces.set_spike_rows("other", extra)
    check_drawn(traces, "other", extra)
    assert axis_labels(traces)[-3:] == ["imported 4", "fresh 2", "check"]
    shuffled = rng.permutation(150)
    rows2 = [("imported 5", other[shuffled], other[shuffled] > 1.4, palette.BLUE, "x")]   # unsorted input
    traces.set_spike_rows("audit", rows2)
    check_drawn(traces, "audit", rows2)
    assert axis_labels(traces)[-2:] == ["imported 5", "check"]

    traces.clear_spike_rows("audit")
    traces.clear_spike_rows("other")
    assert traces.rows.drawn("audit") == [] and traces.rows.count() == 0
    assert len(traces.plot.getPlotItem().items) == items_before
    assert axis_labels(traces) == labels_before
    assert traces.vb.viewRange()[1] == pytest.approx(y_before)
    traces.clear_spike_rows("audit")                                    # clearing twice is harmless


def test_rows_are_checked(demo_window):
    traces = demo_window.traces
    with pytest.raises(ValueError, match="one entry per time"):
        traces.set_spike_rows("x", [("a", np.arange(3.0), np.ones(2, bool), palette.BLUE, "o")])
    with pytest.raises(ValueError, match="finite"):
        traces.set_spike_rows("x", [("a", np.array([0.1, np.nan]), None, palette.BLUE, "o")])
    assert traces.rows.count() == 0


def test_the_show_choice_follows_the_shown_group(demo_window):
    win = demo_window
    combo, rec = win.traces.show_combo, win.bench.recording
    for g in reversed(range(len(rec.groups))):
        win.bench.show_group(g)
        assert combo.currentData() == ("group", g)
        assert combo.currentText().startswith(rec.group_names[g])
    win.bench.show_channels(range(rec.n_channels), "all channels")
    assert combo.currentData() == ("all", None)
