"""The audit view in the real window: import an "old sorting" of the demo, audit it off the GUI
thread, look at one unit beside its closest fresh unit, export, and survive bad files."""

from __future__ import annotations

import csv
import os
import shutil
from dataclasses import replace

import numpy as np
import pytest
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QDialog, QFileDialog, QTabBar

from rigside.core.audit.views import PairView, UnitView, pair_view
from rigside.core.numbers import format_number
from rigside.core.synthetic.truth import write_imperfect_sorting
from rigside.gui.audit_controller import AUDIT_LABEL
from rigside.gui.dialogs.audit_import import AuditImportDialog
from rigside.gui.panels.audit_pair import FRESH, IMPORTED, TRACE_KEY, shown_channels
from rigside.gui.panels.audit_view import DEPTH_COLUMN, TABLE_SPECS, UNIT_ROLE
from rigside.gui.screenshot import capture, colour_share, pixels
from rigside.sample_data import demo_path, probe_demo_path
from tests.app.units_helpers import cluster_demo


def old_sorting(tmp_path, name: str = "old.csv", seed: int = 1) -> tuple:
    """The demo's true units with 10% of each unit's spikes removed and 10% extra spikes added
    at random times (the size of error expert sorting makes; common practice, no source)."""
    path = tmp_path / name
    return path, write_imperfect_sorting(demo_path().with_name("demo.truth.csv"), path, 0.1, seed)


def wait_audit(win, qtbot) -> None:
    assert win.wait_idle(120)
    qtbot.waitUntil(lambda: win.audit.pair is not None or win.audit.result is None, timeout=30000)
    assert win.wait_idle(60)


def audit_of(win, qtbot, path):
    """Cluster the demo, audit ``path`` against its session in the window and return the result."""
    cluster_demo(win)
    assert win.audit.start(path)
    wait_audit(win, qtbot)
    r = win.audit.result
    assert r is not None, win.last_error
    return r


def split(curve) -> list[np.ndarray]:
    """The finite pieces of a NaN-separated curve."""
    y = np.asarray(curve.yData)
    return [p for p in np.split(y, np.flatnonzero(np.isnan(y))) if len(p[np.isfinite(p)])]


def check_pair_plots(win, unit: int) -> None:
    """Everything the pair plots draw equals what the core's pair_view gives."""
    plots = win.audit_panel.plots
    pv = pair_view(win.audit.result, unit, win.bench.recording)
    assert plots.pair.imported.unit == unit and pv.fresh is not None
    for name, side in (("imported", pv.imported), ("fresh", pv.fresh)):
        for shared in (True, False):
            x, y = plots.amp_items[(name, shared)].getData()
            np.testing.assert_array_equal(x, side.times_s[side.shared == shared])
            np.testing.assert_array_equal(y, side.amplitudes_uv[side.shared == shared])
        curve = plots.isi_curves[name]
        np.testing.assert_allclose(curve.xData, side.isi_edges_s * 1e3)
        np.testing.assert_array_equal(curve.yData, side.isi_counts)
        blocks = [int(np.flatnonzero(side.channels == c)[0]) for c in plots.wave_channels if c in side.channels]
        mean = side.waveforms.mean(axis=0)
        pieces = [p[np.isfinite(p)] for p in split(plots.wave_curves[name])]
        assert len(pieces) == len(blocks)
        for k, piece in zip(blocks, pieces):
            np.testing.assert_allclose(piece, mean[:, k], rtol=1e-6, atol=1e-4)
    check_trace_rows(win, pv)


def check_trace_rows(win, pv) -> None:
    """Both sides' spikes in the trace view's window are on the trace: ticks for the shared
    ones, the side's own symbol for those it alone holds."""
    t0, t1 = win.bench.view
    inside = pv.spikes_between(t0, t1)
    drawn = win.traces.rows.drawn(TRACE_KEY)
    assert len(drawn) == len(inside)
    for (ticks, alone), name in zip(drawn, ("imported", "fresh")):
        times, shared = inside[name]
        np.testing.assert_array_equal(ticks, times[shared])
        np.testing.assert_array_equal(alone, times[~shared])
    labels = [label for _, label in win.traces.rows.ticks()]
    assert labels == [f"imported {pv.imported.unit}"] + ([f"fresh {pv.fresh.unit}"] if pv.fresh else [])


def test_audit_against_the_session_shows_each_pair_as_the_core_computes_it(demo_window, qtbot, tmp_path):
    win = demo_window
    path, counts = old_sorting(tmp_path)
    r = audit_of(win, qtbot, path)
    assert r.fresh.source.startswith("session")
    assert r.fresh.sorting is not win.units.sorting          # a frozen copy: curation may go on
    panel = win.audit_panel
    check_audit_table(win, panel, counts)
    unit = check_stepping_to_a_lone_spike(win, qtbot, panel, r)
    check_rows_follow_the_dock(win, qtbot, panel, unit)
    check_exports(win, tmp_path, path, counts)
    check_screenshot(win, panel, tmp_path)

    # a unit without a fresh match shows its own side only
    alone = replace(win.audit.pair, fresh=None)
    win.audit.pair = alone
    win.audit.pair_changed.emit()
    assert "no fresh unit" in panel.plots.header.text()
    assert set(panel.plots.isi_curves) == set(panel.plots.wave_curves) == {"imported"}
    assert all(len(panel.plots.amp_items[("fresh", s)].getData()[0]) == 0 for s in (True, False))


def check_audit_table(win, panel, counts: dict) -> None:
    """One row per imported unit with its spike count, the caution, and headers naming what they show."""
    assert win.docks["audit"].isVisible()
    assert sorted(panel.unit_rows()) == sorted(counts)
    spikes_col = [s[1] for s in TABLE_SPECS].index("n_spikes")
    shown = {u: int(panel.table.item(i, spikes_col).text()) for i, u in enumerate(panel.unit_rows())}
    assert shown == counts
    assert "estimate" in panel.caution.text()
    headers = [panel.table.horizontalHeaderItem(i).text() for i in range(panel.table.columnCount())]
    assert "closest\nfresh unit" in headers and "overlap\n(Jaccard)" in headers
    assert not any("agree" in h or "best" in h for h in headers)
    assert panel.table.isColumnHidden(DEPTH_COLUMN)           # no site positions on the demo's bundles


def check_stepping_to_a_lone_spike(win, qtbot, panel, r) -> int:
    """The first row is chosen on arrival; choose the unit with the most spikes held by one side and
    step the trace view to one of them. Returns the unit."""
    with_match = [u for u in r.imported_ids if r.closest_fresh(int(u)) is not None]
    unit = int(max(with_match, key=lambda u: r.row(int(u))["n_spikes"] - r.row(int(u))["shared_spikes"]))
    panel.select_unit(unit)
    qtbot.waitUntil(lambda: win.audit.pair is not None and win.audit.pair.imported.unit == unit, timeout=30000)
    assert win.wait_idle(30)
    row = r.row(unit)
    assert f"Imported unit {unit}" in panel.plots.header.text()
    lone = panel.plots.unshared_times()
    expected = lone[lone > 0.5 * sum(win.bench.view) + 1e-6][0]
    span = win.bench.view[1] - win.bench.view[0]
    assert panel.plots.step_unshared(1)                           # moves the trace view to a lone spike
    assert list(win.bench.shown_channels) == list(win.bench.recording.groups[row["group"]])
    t0, t1 = win.bench.view
    assert t1 - t0 == pytest.approx(span)
    assert t0 == 0.0 or t0 == pytest.approx(expected - span / 2)
    assert t0 <= expected <= t1
    check_pair_plots(win, unit)
    win.bench.set_view(0.0, win.bench.recording.duration_s)            # the rows follow the trace view
    check_trace_rows(win, win.audit.pair)
    win.bench.set_view(t0, t1)
    return unit


def check_rows_follow_the_dock(win, qtbot, panel, unit: int) -> None:
    """The rows stay while the audit view is tabbed behind another, and go when it closes."""
    dock = win.docks["audit"]
    bar = next(b for b in win.findChildren(QTabBar) if dock.windowTitle() in [b.tabText(i) for i in range(b.count())])
    bar.setCurrentIndex([bar.tabText(i) for i in range(bar.count())].index(win.docks["waveforms"].windowTitle()))
    assert win.traces.rows.count() == 2
    dock.close()
    assert win.traces.rows.count() == 0
    win.actions_by_name["audit_show"].trigger()
    check_trace_rows(win, win.audit.pair)
    panel.table.clearSelection()                                       # no unit chosen: no rows
    assert win.audit.pair is None and win.traces.rows.count() == 0
    panel.select_unit(unit)
    qtbot.waitUntil(lambda: win.audit.pair is not None, timeout=30000)
    assert win.wait_idle(30)
    check_trace_rows(win, win.audit.pair)


def check_exports(win, tmp_path, path, counts: dict) -> None:
    """The CSV has one row per imported unit, the report is one HTML file, the input is never replaced."""
    assert win.audit.export("table", tmp_path / "audit.csv")
    assert win.audit.export("report", tmp_path / "audit.html")
    assert win.wait_idle(60)
    lines = [ln for ln in (tmp_path / "audit.csv").read_text().splitlines() if not ln.startswith("#")]
    rows = list(csv.DictReader(lines))
    assert sorted(int(x["unit"]) for x in rows) == sorted(counts)
    assert (tmp_path / "audit.html").read_text().lstrip().lower().startswith("<!doctype html")
    assert not win.audit.export("table", path)               # never over the imported file
    assert "must" in win.last_error[1]


def check_screenshot(win, panel, tmp_path, name: str = "audit.png") -> None:
    """The audit view across the window's width shows both sides' colours."""
    right = [d for d in win.docks.values()
             if win.dockWidgetArea(d) == Qt.DockWidgetArea.RightDockWidgetArea and d.isVisible()]
    for d in right:
        d.hide()
    win.resize(1700, 1250)
    win.resizeDocks([win.docks["audit"]], [820], Qt.Orientation.Vertical)
    try:
        image = capture(panel, str(tmp_path / name))
    finally:
        for d in right:
            d.show()
    rgb = pixels(image)
    assert colour_share(rgb, IMPORTED, 30) > 0.001 and colour_share(rgb, FRESH, 30) > 0.001
    out = os.environ.get("RIGSIDE_SCREENSHOT_DIR")
    if out:
        shutil.copy(tmp_path / name, os.path.join(out, name))


def test_bad_spike_files_show_a_message_and_a_first_pass_audit_still_works(demo_window, qtbot, tmp_path):
    win = demo_window
    assert win.units.session is None
    late = tmp_path / "late.csv"
    late.write_text("unit,time_s\n1,0.5\n1,99.0\n")
    unsorted = tmp_path / "unsorted.csv"
    unsorted.write_text("unit,time_s\n1,0.5\n1,0.2\n")
    odd = tmp_path / "spikes.xyz"
    odd.write_text("unit,time_s\n1,0.5\n")
    for bad, words in ((late, "within the recording"), (unsorted, "sorted in time"), (odd, "must end in")):
        win.last_error = None
        assert win.audit.start(bad)
        assert win.wait_idle(30)
        assert win.last_error is not None and win.last_error[0] == f"{AUDIT_LABEL} failed"
        assert bad.name in win.last_error[1] and words in win.last_error[1], win.last_error
        assert win.audit.result is None and "failed" in win.audit_panel.state.text()
        for box in list(win.messages):
            box.close()
    before = win.bench.view
    win.actions_by_name["zoom_in"].trigger()                      # the window still answers
    assert win.bench.view != before

    path, counts = old_sorting(tmp_path, seed=2)
    assert win.audit.start(path)
    wait_audit(win, qtbot)
    r = win.audit.result
    assert r is not None, win.last_error
    assert r.fresh.source.startswith("first-pass")
    assert sorted(win.audit_panel.unit_rows()) == sorted(counts)
    assert win.audit.pair is not None
    check_pair_plots(win, win.audit.pair.imported.unit)


def test_menu_import_with_its_choices_then_cancel_leaves_no_result(demo_window, tmp_path, monkeypatch):
    win = demo_window
    path, _ = old_sorting(tmp_path)
    chosen = {}

    def accept(dialog):
        dialog.tolerance.setValue(0.4)
        dialog.offset.setValue(0.001)
        chosen.update(choices=dialog.choices(), group_enabled=dialog.group.isEnabled(),
                      session=dialog.use_session.isEnabled())
        return QDialog.DialogCode.Accepted

    monkeypatch.setattr(QFileDialog, "getOpenFileName", staticmethod(lambda *a, **k: (str(path), "")))
    monkeypatch.setattr(AuditImportDialog, "exec", accept)
    started = []
    monkeypatch.setattr(win.runner, "submit",
                        lambda *a, _orig=win.runner.submit, **k: started.append(a) or _orig(*a, **k))
    win.actions_by_name["audit_import"].trigger()
    c = chosen["choices"]
    assert (c.tolerance_ms, c.offset_s, c.rate_hz, c.group, c.use_session) == (0.4, 0.001, win.bench.recording.rate_hz,
                                                                            None, False)
    assert not chosen["group_enabled"] and not chosen["session"]     # a CSV, and no session yet
    assert started and started[-1][1] == AUDIT_LABEL and started[-1][8].tolerance_ms == 0.4
    assert win.docks["audit"].isVisible()
    assert not win.audit_panel.cancel_button.isHidden()
    assert win.actions_by_name["audit_cancel"].isEnabled()
    win.audit_panel.cancel_button.click()
    assert win.wait_idle(60)
    assert win.audit.result is None
    assert "cancelled" in win.audit_panel.state.text()
    assert win.audit_panel.cancel_button.isHidden()
    assert not win.actions_by_name["audit_report"].isEnabled()


def test_an_audit_needs_an_open_recording(window, tmp_path):
    path, _ = old_sorting(tmp_path)
    assert not window.audit.start(path)
    assert window.last_error[0] == "Cannot start the audit" and "recording" in window.last_error[1]
    assert not window.runner.busy()


def test_wide_groups_show_the_channels_with_the_largest_waveforms():
    t_ms = np.linspace(-0.5, 1.0, 10)
    chans = np.arange(12)
    size = np.array([1, 9, 2, 8, 3, 7, 4, 6, 5, 10, 0.5, 11], dtype=np.float32)
    waves = np.zeros((5, 10, 12), dtype=np.float32)
    waves[:, 3, :] = -size
    side = UnitView(1, np.arange(5.0), np.zeros(5), np.ones(5, bool), chans, t_ms, waves, np.zeros(3), np.arange(4.0))
    pv = PairView(side, None, {})
    # the 8 largest, in recording order (sizes 3, 2, 1 and 0.5 are left out)
    assert list(shown_channels(pv)) == [1, 3, 5, 6, 7, 8, 9, 11]


def test_a_probe_audit_shows_each_units_depth(probe_session, qtbot, tmp_path):
    """On a probe the audit table's depth column is shown and holds the core's unit positions (y_um)."""
    win = probe_session
    truth = probe_demo_path().with_name("probe_demo.truth.csv")
    path = tmp_path / "old_probe.csv"
    counts = write_imperfect_sorting(truth, path, 0.1, 1)
    assert win.audit.start(path)
    wait_audit(win, qtbot)
    r, panel = win.audit.result, win.audit_panel
    assert r is not None, win.last_error
    assert not panel.table.isColumnHidden(DEPTH_COLUMN)
    assert panel.table.horizontalHeaderItem(DEPTH_COLUMN).text() == "depth\nµm"
    y_top = float(win.bench.recording.positions[:, 1].max())
    shown = {int(panel.table.item(i, 0).data(UNIT_ROLE)): panel.table.item(i, DEPTH_COLUMN).text()
             for i in range(panel.table.rowCount())}
    assert sorted(shown) == sorted(counts)
    for u, text in shown.items():
        y = r.row(u)["y_um"]
        assert text == (format_number(y) if np.isfinite(y) else "—")
    assert all(0 <= float(t) <= y_top for t in shown.values() if t != "—")   # on the probe's sites
    check_screenshot(win, panel, tmp_path, "audit_probe.png")
