"""The default window on the sorted probe demo (real widgets, offscreen): the Sites map gets room, no dock is
drawn over another (the cluster plane's caption stays off the waveforms' axis label), the plots are labelled
with their units, and a threshold drag does only the work a move needs (counted, not timed)."""

from __future__ import annotations

import re

from PySide6.QtCore import QEvent, QObject, QRect
from PySide6.QtWidgets import QApplication, QGraphicsItem

from tests.app.test_threshold_workbench import drag_handle


def shown_docks(win) -> dict:
    """Docks a user sees now (a tab behind another is not seen), by panel id, with their window rectangles."""
    return {pid: d.geometry() for pid, d in win.docks.items() if d.isVisible() and not d.visibleRegion().isEmpty()}


def in_window(win, widget) -> QRect:
    return QRect(widget.mapTo(win, widget.rect().topLeft()), widget.size())


def test_probe_session_gives_the_map_room_and_no_dock_covers_another(probe_session):
    win = probe_session
    docks = shown_docks(win)
    assert {"sites", "unit_plots", "unit_plane", "unit_list"} <= set(docks)
    sites = docks["sites"]
    # common practice, no source: a map of a tall probe needs height; here at least a sixth of the width and
    # a third of the height of the window (it was 16% by 26% before)
    assert sites.width() >= win.width() / 6 and sites.height() >= win.height() / 3
    names = sorted(docks)
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            assert not docks[a].intersects(docks[b]), f"{a} {docks[a]} and {b} {docks[b]} overlap"
    for pid in ("unit_plots", "unit_plane"):
        panel = win.panels[pid]
        assert panel.width() >= panel.minimumSizeHint().width()     # not squeezed below what it can show


def test_cluster_plane_caption_is_off_the_waveforms_axis_label(probe_session):
    win = probe_session
    waves = win.unit_panels["plots"].waveforms.plot
    label = waves.getPlotItem().getAxis("bottom").label          # the axis title, a QGraphicsTextItem
    assert "(ms)" in label.toPlainText()
    scene_rect = label.sceneBoundingRect()
    view = waves.viewport()
    top_left = view.mapTo(win, waves.mapFromScene(scene_rect.topLeft().toPoint()))
    margin = int(label.document().documentMargin())                 # the glyphs lie inside the item's margin
    label_rect = QRect(top_left, scene_rect.size().toSize()).adjusted(margin, margin, -margin, -margin)
    assert in_window(win, view).contains(label_rect)               # drawn inside its own view
    caption = win.unit_panels["plane"].status
    assert caption.text() and not in_window(win, caption).intersects(label_rect)


def test_probe_session_plots_name_their_units(probe_session):
    win = probe_session
    views = [v.plot for v in win.unit_panels["plots"].views if hasattr(v, "plot")]
    views += [win.panels["sites"].plot, win.unit_panels["plane"].plot]
    for view in views:
        for side in ("bottom", "left"):
            text = view.getPlotItem().getAxis(side).labelText
            assert re.search(r"\(.+\)", text), f"{side} axis label {text!r} gives no unit"


class LayoutRequests(QObject):
    """Counts the requests to lay out the main window again."""

    def __init__(self, win):
        super().__init__()
        self.win, self.n = win, 0

    def eventFilter(self, obj, event):
        if obj is self.win and event.type() == QEvent.Type.LayoutRequest:
            self.n += 1
        return False


def test_threshold_drag_redoes_only_what_a_move_changes(probe_session, monkeypatch):
    win = probe_session
    ev, traces = win.bench.events, win.traces
    drag_handle(win, 5.0, finish=True)
    assert win.wait_idle(60)            # the waveforms cut on release are drawn before the drag
    for _ in range(3):                  # and the layouts their drawing asked for are done
        QApplication.processEvents()
    calls = {"rows_on": 0, "curve": 0}
    rows_on, set_data = ev.rows_on, traces.curve.setData

    def counted_rows_on(*args, **kwargs):
        calls["rows_on"] += 1
        return rows_on(*args, **kwargs)

    def counted_set_data(*args, **kwargs):
        calls["curve"] += 1
        return set_data(*args, **kwargs)
    monkeypatch.setattr(ev, "rows_on", counted_rows_on)
    monkeypatch.setattr(traces.curve, "setData", counted_set_data)
    requests = LayoutRequests(win)
    QApplication.instance().installEventFilter(requests)
    try:
        for k in (5.2, 5.4, 5.6, 5.8):
            drag_handle(win, k, finish=False)
            QApplication.processEvents()
            c = win.bench.channel
            n = int(ev.counts(threshold_sigma=win.bench.thresholds_sigma)[c])
            assert f"<b>{n:,}</b> events" in win.panels["threshold"].summary.text()   # the counts follow
    finally:
        QApplication.instance().removeEventFilter(requests)
    assert abs(win.bench.thresholds_sigma[win.bench.channel] - 5.8) < 1e-6
    assert requests.n == 0               # new counts text: no new layout of the window
    assert calls == {"rows_on": 0, "curve": 0}   # the same events in view, the same traces (blitted)
    cached = QGraphicsItem.CacheMode.DeviceCoordinateCache
    assert traces.curve.cacheMode() == cached and win.panels["count_curve"].observed.curve.cacheMode() == cached
    drag_handle(win, 5.8, finish=True)
    assert win.wait_idle(60)
