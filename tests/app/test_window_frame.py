"""Opening, errors, cancelling, layout memory, dialogs and screenshots of the real window."""

from __future__ import annotations

import threading

import numpy as np
import pytest
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QDialog

from rigside.gui import jobs, palette
from rigside.gui.dialogs.about import about_text
from rigside.gui.dialogs.raw_layout import RawLayoutDialog
from rigside.gui.launch import run_window
from rigside.gui.screenshot import capture, colour_share, distinct_colours, pixels
from rigside.gui.window import MainWindow


def write_noise(path, seconds: float, channels: int, rate: float = 30000.0, meta: bool = True) -> None:
    rng = np.random.default_rng(1)
    (rng.normal(0, 60, size=(int(seconds * rate), channels))).astype(np.int16).tofile(path)
    if meta:
        path.with_name(path.stem + ".rigside.toml").write_text(
            f"[recording]\nchannels = {channels}\nrate_hz = {rate}\ngain_uv = 0.195\n")


def test_a_bad_file_shows_a_message_and_the_window_stays_usable(window, tmp_path, monkeypatch):
    bad = tmp_path / "odd.bin"
    bad.write_bytes(b"\x00" * 1001)
    bad.with_name("odd.rigside.toml").write_text("[recording]\nchannels = 4\nrate_hz = 30000.0\n")
    assert not window.open_path(str(bad))
    title, message = window.last_error
    assert "multiple of channels x item size" in message
    assert window.messages and window.messages[-1].isVisible()
    assert "Traceback" not in message
    window.messages[-1].close()
    broken = tmp_path / "broken.bin"
    broken.write_bytes(b"\x00" * 64)
    broken.with_name("broken.rigside.toml").write_text("[recording\nchannels = ")
    assert not window.open_path(str(broken))
    assert "valid TOML" in window.last_error[1]
    assert not window.open_path(str(tmp_path / "missing.bin"))
    assert "must exist" in window.last_error[1]
    window.messages[-1].close()
    # still usable: a good recording opens afterwards
    good = tmp_path / "noise.bin"
    write_noise(good, 1.0, 4)
    assert window.open_path(str(good))
    assert window.wait_idle(60)
    assert window.analysis_outcome == "done"


def test_cancel_a_running_detection(window, tmp_path, qtbot, monkeypatch):
    rec = tmp_path / "long.bin"
    write_noise(rec, 30.0, 8)
    gate = threading.Event()
    real = jobs.analyse

    def held(*args, progress=None, cancel=None):
        def report_and_hold(fraction, message):
            progress(fraction, message)
            gate.wait(20)  # the job waits at each report until the test has pressed cancel

        return real(*args, progress=report_and_hold, cancel=cancel)

    monkeypatch.setattr(jobs, "analyse", held)
    for start in (lambda: window.open_path(str(rec)), window.start_detection):
        gate.clear()
        with qtbot.waitSignal(window.runner.progressed, timeout=30000):
            start()
        assert window.runner.busy("analysis") and window.task_status.cancel_button.isVisible()
        window.task_status.cancel_button.click()
        gate.set()
        assert window.wait_idle(30)
        assert window.analysis_outcome == "cancelled"
        assert window.bench.events is None
        assert "cancelled" in window.statusBar().currentMessage()
        assert not window.task_status.cancel_button.isVisible()


def test_raw_file_without_metadata_asks_for_its_layout(window, tmp_path, monkeypatch):
    raw = tmp_path / "plain.dat"
    write_noise(raw, 0.5, 6, meta=False)

    def fill_in(dialog):
        dialog.channels.setValue(7)
        assert "not a whole number of 14-byte frames" in dialog.implied.text()
        dialog.channels.setValue(6)
        dialog.rate.setValue(30000.0)
        dialog.dtype.setCurrentText("int16")
        dialog.group_size.setValue(3)
        assert "15,000 samples per channel, 0.50 s" in dialog.implied.text()
        return QDialog.DialogCode.Accepted

    monkeypatch.setattr(RawLayoutDialog, "exec", fill_in)
    assert window.open_path(str(raw))
    rec = window.bench.recording
    assert rec.n_channels == 6 and [g.tolist() for g in rec.groups] == [[0, 1, 2], [3, 4, 5]]
    assert window.wait_idle(60)
    (tmp_path / "plain.rigside.toml").unlink()    # saved by the dialog; without it the dialog asks again
    monkeypatch.setattr(RawLayoutDialog, "exec", lambda dialog: QDialog.DialogCode.Rejected)
    assert not window.open_path(str(raw))
    assert window.bench.recording is rec


def test_layout_and_recent_files_are_restored(qtbot, tmp_path):
    first = MainWindow()
    qtbot.addWidget(first)
    first.show()
    first.docks["features"].setVisible(False)
    first.remember(str(tmp_path / "a.bin"))
    first.close()
    second = MainWindow()
    qtbot.addWidget(second)
    second.show()
    assert not second.docks["features"].isVisible()
    assert second.docks["waveforms"].isVisible()
    assert second.recent_files() == [str(tmp_path / "a.bin")]
    assert [a.text() for a in second.recent_menu.actions()] == [str(tmp_path / "a.bin")]
    second.reset_layout()
    assert second.docks["features"].isVisible()
    second.close()


def test_about_states_the_cautions(window):
    text = about_text("0")
    for phrase in ("not for diagnosis", "decision about a patient", "ethics approval",
                   "data-protection", "estimates"):
        assert phrase in text
    window.actions_by_name["about"].trigger()
    boxes = [w for w in window.findChildren(QDialog) if w.isVisible()]
    assert boxes and "ethics approval" in boxes[-1].text()
    boxes[-1].close()


def test_rate_strip_click_moves_the_traces(demo_window):
    win = demo_window
    strip = win.panels["rate_strip"]
    edges, rate, art = strip.rates()
    ev = win.bench.events
    assert int(round(np.sum(rate * np.diff(edges)))) == int(win.bench.counts()[win.bench.shown_channels].sum())
    assert int(round(np.sum(art * np.diff(edges)))) == int(ev.artefact.sum())
    width = win.bench.view[1] - win.bench.view[0]
    strip.jump_to(2.0)
    t0, t1 = win.bench.view
    assert abs(0.5 * (t0 + t1) - 2.0) < 1e-9 and abs((t1 - t0) - width) < 1e-9
    lo, hi = win.traces.vb.viewRange()[0]
    assert abs(lo - t0) < 1e-6 and abs(hi - t1) < 1e-6
    assert strip.region.getRegion() == pytest.approx((t0, t1))


def test_waveforms_and_features_follow_the_selection(demo_window):
    win = demo_window
    b = win.bench
    wave = win.panels["waveforms"]
    assert wave.snippets is not None
    g = int(b.recording.channel_group[b.channel])
    assert wave.snippets.shape[2] == len(b.recording.groups[g])
    assert wave.n_events == int((b.mask() & (b.events.group == g)).sum())
    feats = win.panels["features"]
    assert feats.mode == "points" and feats.n_shown == wave.n_events
    win.actions_by_name["next_group"].trigger()
    assert win.wait_idle(30)
    g2 = int(b.recording.channel_group[b.channel])
    assert g2 != g and feats.n_shown == int((b.mask() & (b.events.group == g2)).sum())


def test_dense_features_draw_as_a_density_image(demo_window):
    from rigside.core.events import EventTable
    from rigside.core.signal.features import Features
    win = demo_window
    b = win.bench
    rec = b.recording
    n = 300_000
    rng = np.random.default_rng(0)
    ev = EventTable(sample=np.sort(rng.integers(0, rec.n_samples, n)), channel=np.zeros(n, int),
                    group=np.zeros(n, int), amplitude_uv=-rng.uniform(30, 300, n).astype(np.float32),
                    amplitude_sigma=rng.uniform(3, 30, n).astype(np.float32), artefact=np.zeros(n, bool),
                    rate_hz=rec.rate_hz, n_samples=rec.n_samples, sigma_uv=b.events.sigma_uv, floor_sigma=3.0)
    win.runner.shutdown()
    b.set_events(b.analysis.noise, ev)
    b.set_features(Features(rng.normal(size=(n, 6)).astype(np.float32),
                            ["PC1", "PC2", "PC3", "peak_uv", "width_ms", "energy_uv2"]))
    feats = win.panels["features"]
    assert feats.mode == "density"
    image = feats.image.image
    assert image is not None and image.shape == (256, 256) and image.max() > 0
    win.wait_idle(30)


def test_dense_event_marks_draw_one_pixel_per_lane_and_column(demo_window, monkeypatch):
    from rigside.core.event_pixels import event_pixels
    from rigside.gui.panels import event_marks
    win = demo_window
    b, traces = win.bench, win.traces
    monkeypatch.setattr(event_marks, "MARKER_LIMIT", 10)    # the demo holds too few events to be dense
    b.set_view(0.0, b.recording.duration_s)
    marks = traces.marks
    assert marks.dense and marks.rug.isVisible()
    a, z = 0, b.recording.n_samples
    width = marks.rug_pixels.shape[1]
    flags, _ = event_pixels(b.events, traces.lane, b.thresholds_sigma, a, z, width)
    n = len(traces.offsets)
    drawn = marks.rug_pixels[event_marks.RUG_ROWS - 1::event_marks.RUG_ROWS][::-1]   # lane 0 at the top
    np.testing.assert_array_equal(drawn[:len(flags)], flags > 0)
    assert drawn.shape[0] == n and marks.rug_pixels.sum() == (flags > 0).sum() > 0
    monkeypatch.undo()
    b.set_view(0.0, 1.0)
    assert not marks.dense and len(marks.times()) > 0


def test_screenshot_of_the_demo_has_content(demo_window, tmp_path):
    win = demo_window
    win.resize(1600, 1000)
    out = tmp_path / "shot.png"
    rgb = pixels(capture(win, str(out)))
    assert out.stat().st_size > 20000
    assert distinct_colours(rgb) > 50
    # the threshold handle (orange), event markers (vermillion) and traces are drawn
    assert colour_share(rgb, palette.THRESHOLD, 25) > 0.0005
    assert colour_share(rgb, palette.EVENT, 25) > 0.0001
    trace_area = rgb[100:500, 80:900]
    assert trace_area.std() > 20


def test_run_window_screenshot_entry_point(tmp_path, qapp):
    out = tmp_path / "entry.png"
    assert run_window(None, screenshot=str(out), demo=True) == 0
    from PySide6.QtGui import QImage
    rgb = pixels(QImage(str(out)))
    assert rgb.shape[0] >= 900 and distinct_colours(rgb) > 50
    assert run_window(str(tmp_path / "nothing.bin"), screenshot=str(tmp_path / "x.png")) == 2
    assert not (tmp_path / "x.png").exists()


def test_extensions_add_docks_that_join_the_saved_layout(qtbot):
    from rigside.gui.panels.base import Panel

    class Notes(Panel):
        panel_id = "notes"
        title = "Notes"

    def install(win):
        return win.add_panel(Notes(win.bench, win.runner), Qt.DockWidgetArea.BottomDockWidgetArea,
                             tab_with=win.docks["features"])

    first = MainWindow(extensions=[install])
    qtbot.addWidget(first)
    first.show()
    assert "notes" in first.panels and first.extensions[0] is first.docks["notes"]
    assert first.docks["notes"].toggleViewAction() in first.panels_menu.actions()
    first.docks["notes"].setVisible(False)
    first.close()
    second = MainWindow(extensions=[install])
    qtbot.addWidget(second)
    second.show()
    assert not second.docks["notes"].isVisible()
    second.reset_layout()
    assert second.docks["notes"].isVisible()
    second.close()
