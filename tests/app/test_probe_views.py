"""The probe views of the window (real widgets, offscreen) on the sorted probe demo: traces stacked as the
sites lie on the probe with their depths, the Sites panel (sites, units, clicks, the selected unit's
footprint) and thresholds set over a site's neighbourhood; a bundle recording keeps today's order."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
import pytest
from PySide6.QtCore import Qt
from PySide6.QtGui import QFontMetrics
from scipy.spatial.distance import cdist

from rigside.core.quality.footprint import unit_footprint
from rigside.gui.screenshot import capture, colour_share, pixels
from tests.app.test_threshold_workbench import drag_handle


def lane_ticks(win) -> list[tuple[float, str]]:
    return list(win.traces.plot.getPlotItem().getAxis("left")._tickLevels[0])


def lane_labels(win) -> list[str]:
    return [text for _, text in lane_ticks(win)]


def test_probe_traces_stack_from_the_top_of_the_probe_down_with_depths(probe_session):
    win = probe_session
    rec, shown = win.bench.recording, win.bench.shown_channels
    y = rec.positions[shown, 1]
    assert sorted(shown.tolist()) == list(range(rec.n_channels))
    assert np.all(np.diff(y) <= 0)                                   # the tip (y 0) at the bottom
    assert np.all(np.diff(win.traces.offsets) < 0)                   # lanes go down the screen in that order
    ticks = lane_ticks(win)
    assert len(ticks) > 3
    for offset, label in ticks:                                      # dense lanes: every k-th one is named
        c = shown[int(round(-offset / win.traces.spacing))]
        assert label == f"ch {c} · {rec.positions[c, 1]:g} µm"
    font = win.traces.plot.getPlotItem().getAxis("left").style["tickFont"]
    vb = win.traces.vb
    gaps_px = np.abs(np.diff([vb.mapViewToScene(pg.Point(0, o)).y() for o, _ in ticks]))
    assert gaps_px.min() >= QFontMetrics(font or win.font()).height() - 0.5   # names do not overlap
    win.bench.select_channel(int(shown[0]))
    win.bench.step_channel(1)                                        # one lane down: the next site down
    assert win.bench.channel == int(shown[1])


def test_bundle_traces_keep_the_channel_order(demo_window):
    win = demo_window
    rec = win.bench.recording
    assert win.bench.shown_channels.tolist() == list(rec.groups[0])
    assert lane_labels(win) == [f"ch {c}" for c in rec.groups[0]]
    assert not win.docks["sites"].isVisible()
    assert win.panels["threshold"].scope.findData("neighbourhood") < 0


def test_sites_panel_draws_sites_units_and_the_chosen_units_footprint(probe_session, qtbot, tmp_path):
    win = probe_session
    dock, panel, ctl = win.docks["sites"], win.panels["sites"], win.units
    rec = win.bench.recording
    assert dock.isVisible()
    assert panel.plot.getPlotItem().getAxis("left").labelText == "along the probe, y (µm)"
    assert panel.plot.getPlotItem().getAxis("bottom").labelText == "across the probe, x (µm)"
    np.testing.assert_array_equal(np.column_stack(panel.sites.getData()), rec.positions)
    units = sorted(u for u in ctl.metrics if u > 0)
    assert panel.unit_ids.tolist() == units
    ux, uy = panel.units.getData()
    np.testing.assert_allclose(ux, [ctl.metrics[u]["x_um"] for u in units])
    np.testing.assert_allclose(uy, [ctl.metrics[u]["y_um"] for u in units])

    u = units[-1]
    qtbot.mouseClick(panel.plot.viewport(), Qt.MouseButton.LeftButton, pos=panel.unit_screen_pos(u))
    assert ctl.selection == [u]
    table = win.unit_panels["list"]
    rows = table.table.selectionModel().selectedRows()
    assert [table.model.unit_at(r.row()) for r in rows] == [u]               # selected in the unit list
    qtbot.waitUntil(lambda: panel.footprint is not None and panel.footprint.unit == u, timeout=20000)
    s = ctl.session
    want = unit_footprint(rec, s.events, s.params, s.sorting, u)              # the core's footprint
    fp = panel.footprint
    assert fp.peak_channel == want.peak_channel and fp.channels.tolist() == want.channels.tolist()
    np.testing.assert_allclose(fp.mean_uv, want.mean_uv)
    d = cdist(rec.positions[[fp.peak_channel]], rec.positions)[0]           # its neighbourhood (scipy)
    assert fp.channels.tolist() == np.flatnonzero(d <= s.params.probe.radius_um).tolist()
    x, y = panel.waves.getData()
    drawn = y[np.isfinite(y)].reshape(len(fp.channels), -1).T                 # one little waveform per site
    np.testing.assert_allclose(drawn, rec.positions[fp.channels, 1] + fp.mean_uv * panel.um_per_uv, rtol=1e-5)
    assert panel.bar_text.toPlainText().endswith(" µV")
    bar_uv = float(panel.bar_text.toPlainText().split()[0])
    by = panel.bar.getData()[1]
    assert by[1] - by[0] == pytest.approx(bar_uv * panel.um_per_uv)         # the scale bar is that many µV
    rgb = pixels(capture(panel, str(tmp_path / "sites.png")))
    assert colour_share(rgb, ctl.unit_colour(u), 30) > 0.002                 # the footprint in the unit's colour

    site = int(fp.channels[0])
    qtbot.mouseClick(panel.plot.viewport(), Qt.MouseButton.LeftButton,
                     pos=panel.to_widget(*rec.positions[site]))
    assert win.bench.channel == site and win.traces.lane[site] >= 0           # the trace view goes there
    assert win.traces.selected_curve.getData()[0] is not None


def test_threshold_drag_over_a_sites_neighbourhood(probe_session):
    win = probe_session
    b, thr = win.bench, win.panels["threshold"]
    site = int(b.shown_channels[len(b.shown_channels) // 2])
    b.select_channel(site)
    thr.scope.setCurrentIndex(thr.scope.findData("neighbourhood"))
    assert b.scope == "neighbourhood"
    before = b.thresholds_sigma.copy()
    drag_handle(win, 6.5)
    near = np.flatnonzero(cdist(b.recording.positions[[site]], b.recording.positions)[0]
                          <= b.analysis.params.probe.radius_um)
    changed = np.flatnonzero(b.thresholds_sigma != before)
    assert changed.tolist() == near.tolist() and 1 < len(near) < b.recording.n_channels
    np.testing.assert_allclose(b.thresholds_sigma[near], 6.5, atol=1e-6)
    counts = b.events.counts(threshold_sigma=b.thresholds_sigma)
    n = int(counts[near].sum())
    assert f"its neighbourhood ({len(near)} sites within" in thr.summary.text()
    assert f"{n:,} events" in thr.summary.text()
    assert f"{len(near)} sites around" in win.traces.handle.label.format


def test_unit_waveforms_on_a_probe_show_the_units_own_sites(probe_session):
    win = probe_session
    ctl, wf = win.units, win.unit_panels["plots"].waveforms
    rec = win.bench.recording
    u = max((v for v in ctl.metrics if v > 0), key=lambda v: ctl.metrics[v]["y_um"])   # the highest unit
    ctl.set_selection([u])
    assert win.wait_idle(60)
    snips, channels = wf.snippets[u]
    assert len(channels) > 8 and len(wf.columns) == 8               # a shank: 8 of its sites are drawn
    mean = snips.mean(axis=0)
    ptp = mean.max(axis=0) - mean.min(axis=0)                        # peak to peak (numpy, by hand)
    assert sorted(wf.columns) == wf.columns
    assert set(wf.columns) == set(np.argsort(-ptp)[:8].tolist())
    main = int(ctl.metrics[u]["main_channel"])
    assert main in {int(channels[c]) for c in wf.columns}            # the unit's own channel is among them
    drawn_y = rec.positions[[int(channels[c]) for c in wf.columns], 1]
    assert abs(np.median(drawn_y) - ctl.metrics[u]["y_um"]) < 60     # near the unit, not the shank's first sites
