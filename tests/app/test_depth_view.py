"""The probe views in the window (real widgets, offscreen), on a sorted session of the bundled probe
demo: the events' depth against time, coloured by amplitude, with labelled axes and colour bar;
zooming grids the shown span again; the unit list gives each unit's depth and drift; a bundle
recording hides the depth view."""

from __future__ import annotations

import numpy as np
import pytest
from PySide6.QtCore import Qt

from rigside.core.numbers import format_number
from rigside.core.quality.depth_image import event_depth_image
from rigside.core.quality.unit_position import POSITION_COLUMNS
from rigside.gui import jobs
from rigside.gui.screenshot import capture, colour_share, pixels
from tests.app.conftest import demo_analysis


def test_probe_events_are_drawn_as_depth_against_time(probe_session, qtbot, tmp_path, monkeypatch):
    win = probe_session
    dock, panel = win.docks["depth_time"], win.panels["depth_time"]
    assert dock.isVisible() and panel.result is not None
    ev, rec = win.bench.events, win.bench.recording
    expected = event_depth_image(ev, np.arange(rec.n_channels), rec.positions[:, 1], win.bench.thresholds_sigma,
                                 (0.0, rec.duration_s), *panel.result.values.shape)
    np.testing.assert_array_equal(panel.result.values, expected.values)   # the view draws the core's grid
    assert panel.result.n_events == int(ev.mask(threshold_sigma=win.bench.thresholds_sigma).sum())
    assert panel.plot.getAxis("bottom").labelText == "time (s)"
    assert panel.plot.getAxis("left").labelText == "depth (µm)"
    assert panel.bar.getAxis("left").labelText == "peak (µV)"      # the colour bar, beside its scale
    assert panel.bar.levels() == pytest.approx(panel.result.levels)
    rgb = pixels(capture(panel, str(tmp_path / "depth_time.png")))
    assert colour_share(rgb, (255, 255, 255), 10) > 0.3                   # white where no event lies
    assert 1 - colour_share(rgb, (255, 255, 255), 10) > 0.05              # and coloured cells where they do

    whole = panel.result.n_events
    panel.plot.setXRange(0.5, 1.0, padding=0.0)                           # zoom in time
    qtbot.waitUntil(lambda: panel.result.time_range[1] < 1.5 and not win.runner.busy(), timeout=20000)
    t0, t1 = panel.result.time_range
    assert t0 == pytest.approx(0.5, abs=0.03) and t1 == pytest.approx(1.0, abs=0.03)
    assert 0 < panel.result.n_events < whole
    assert panel.bar.levels() == pytest.approx(expected.levels)           # the colour scale stays the shank's

    model, ctl = win.unit_panels["list"].model, win.units                 # the unit list: depth and drift
    headers = [model.headerData(c, Qt.Orientation.Horizontal) for c in range(model.columnCount())]
    assert headers[-3:] == ["depth\nµm", "moves\nµm/min", "note"]
    depth, drift = headers.index("depth\nµm"), headers.index("moves\nµm/min")
    assert model.headerData(depth, Qt.Orientation.Horizontal, Qt.ItemDataRole.ToolTipRole) == POSITION_COLUMNS["y_um"]
    units = [r for r in range(model.rowCount()) if not model.is_pool(r)]
    assert ctl.metrics and len(ctl.metrics) == len(units)
    assert model.rowCount() == len(units) + len(ctl.sorting.pool_counts())    # pools: no depth, no drift
    for r in units:
        m = ctl.metrics[model.unit_at(r)]
        assert model.text(r, depth) == format_number(float(m["y_um"]))
        value = float(m["drift_um_per_min"])           # undefined on the 2 s demo: "—", its reason in the tooltip
        assert model.text(r, drift) == ("—" if np.isnan(value) else format_number(value, signed=True))

    cache = demo_analysis()                      # a bundle recording (the demo's cached analysis) hides it
    monkeypatch.setattr(jobs, "analyse", lambda rec, *a, progress=None, cancel=None:
                        (cache["noise"], cache["events"], cache["truth"]))
    monkeypatch.setattr(jobs, "features", lambda *a, progress=None, cancel=None: cache["features"])
    assert win.open_demo() and win.wait_idle(120)
    assert not dock.isVisible() and panel.result is None
    win.actions_by_name["reset_layout"].trigger()
    assert not dock.isVisible() and win.docks["waveforms"].isVisible()
    assert "depth\nµm" not in [model.headerData(c, Qt.Orientation.Horizontal) for c in range(model.columnCount())]
