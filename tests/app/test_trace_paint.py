"""What one change of the visible span costs the window: one paint of the trace view, and no other panel moved."""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import QEvent, QObject
from PySide6.QtWidgets import QApplication


class PaintCount(QObject):
    """Paint events received by the watched widgets, by name."""

    def __init__(self, widgets: dict):
        super().__init__()
        self.widgets = widgets
        self.counts = dict.fromkeys(widgets, 0)
        for w in widgets.values():
            w.installEventFilter(self)

    def eventFilter(self, obj, event):
        if event.type() == QEvent.Type.Paint:
            for name, w in self.widgets.items():
                if w is obj:
                    self.counts[name] += 1
        return False


def settle() -> None:
    for _ in range(3):
        QApplication.processEvents()


def test_a_view_change_paints_the_trace_view_once_and_nothing_else(demo_window):
    win = demo_window
    b, traces = win.bench, win.traces
    b.show_channels(range(b.recording.n_channels), "all channels")
    b.set_view(0.5, 0.7)
    assert win.wait_idle(30)
    settle()
    watched = {"traces": traces.plot.viewport(), "count_curve": win.panels["count_curve"].layout_widget.viewport()}
    counter = PaintCount(watched)
    for k in range(3):
        b.set_view(1.0 + 0.3 * k, 1.2 + 0.3 * k)
        settle()
        assert win.wait_idle(30)
        settle()
    assert counter.counts == {"traces": 3, "count_curve": 0}


def test_the_drawn_lanes_are_the_visible_samples_with_one_gap_point_each(demo_window):
    win = demo_window
    b, traces = win.bench, win.traces
    b.show_channels(range(b.recording.n_channels), "all channels")
    b.set_view(1.0, 1.02)                                      # few samples: drawn one by one
    assert win.wait_idle(30)
    a, z = traces.visible_samples()
    blk = traces.source.block
    x, y = traces.curve.getData()
    n = z - a
    lanes = len(traces.offsets)
    assert len(x) == lanes * (n + 1)
    x, y = x.reshape(lanes, n + 1), y.reshape(lanes, n + 1)
    assert np.all(np.isnan(x[:, -1])) and np.all(np.isnan(y[:, -1]))
    np.testing.assert_allclose(x[:, :-1], np.tile(np.arange(a, z) / b.recording.rate_hz, (lanes, 1)))
    expected = blk.lo[a - blk.start:z - blk.start].T + traces.offsets[:, None]
    np.testing.assert_allclose(y[:, :-1], expected, rtol=1e-6)


def test_the_status_bar_keeps_its_height_when_work_starts(window):
    settle()
    bar, central = window.statusBar(), window.centralWidget()
    before = bar.height(), central.geometry()
    window.task_status._on_started("reading traces")
    settle()
    assert window.task_status.bar.isVisible()
    assert (bar.height(), central.geometry()) == before
    window.task_status._on_idle()
    settle()
    assert (bar.height(), central.geometry()) == before
