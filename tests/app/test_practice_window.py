"""Training at the rig in the window: a practice recording made from the dialog, the trade-off view,
hiding and revealing ground truth, and the saved summary (real widgets, offscreen)."""

from __future__ import annotations

import csv

import numpy as np
import pytest
from PySide6.QtCore import QPoint, QPointF, Qt, QTimer
from PySide6.QtGui import QImage

from rigside.cli.main import main
from rigside.core.synthetic.settings import SynthSettings
from rigside.core.synthetic.tradeoff import STEP_SIGMA, tradeoff_curve
from rigside.gui.practice_frame import WRITE_LABEL
from rigside.gui.practice_summary import PAGE
from rigside.sample_data import demo_path

CLI_OPTIONS = ["--seconds", "3", "--channels", "8", "--units", "4", "--snr", "6", "12", "--rates", "5", "30",
               "--noise-uv", "9", "--noise-colour", "white", "--hum-uv", "20", "--artefacts-per-min", "0",
               "--overlap-fraction", "0.1", "--seed", "11"]


def _fill(dialog, folder) -> None:
    """Type the settings of CLI_OPTIONS into the dialog's widgets."""
    dialog.folder.setText(str(folder))
    dialog.name.setText("from_dialog")
    dialog.seconds.setValue(3.0)
    dialog.channels.setValue(8)
    dialog.units.setValue(4)
    dialog.amplitude_kind.setCurrentIndex(1)
    dialog.amp_low.setValue(6.0)
    dialog.amp_high.setValue(12.0)
    dialog.rate_low.setValue(5.0)
    dialog.rate_high.setValue(30.0)
    dialog.noise.setValue(9.0)
    dialog.colour.setCurrentText("white")
    dialog.hum.setValue(20.0)
    dialog.artefacts.setValue(0.0)
    dialog.overlap.setValue(0.1)
    dialog.seed.setValue(11)


def test_dialog_writes_the_command_lines_bytes_and_opens_the_recording(window, qtbot, tmp_path):
    started = []
    window.runner.started.connect(started.append)
    progress = []
    window.runner.progressed.connect(lambda label, f, m: progress.append((label, f)))
    seen = {}

    def answer() -> None:
        d = window.practice.dialog
        _fill(d, tmp_path)
        seen["size"] = d.size.text()
        seen["ok"] = d.ok_button.isEnabled()
        qtbot.mouseClick(d.ok_button, Qt.MouseButton.LeftButton)
    QTimer.singleShot(0, answer)
    window.actions_by_name["new_practice"].trigger()
    assert seen["ok"] and "MB on disk" in seen["size"]
    assert qtbot.waitUntil(lambda: window.bench.recording is not None, timeout=60000) is None
    assert window.wait_idle(120)
    assert WRITE_LABEL in started and any(label == WRITE_LABEL for label, _ in progress)
    assert window.bench.recording.path == tmp_path / "from_dialog.bin"
    assert window.bench.analysis.truth is not None and window.practice.panel.curve is not None

    assert main(["synth", str(tmp_path / "from_cli.bin"), *CLI_OPTIONS, "--quiet"]) == 0
    for suffix in (".bin", ".truth.csv", ".truth_units.csv", ".synth.toml"):
        assert (tmp_path / f"from_dialog{suffix}").read_bytes() == (tmp_path / f"from_cli{suffix}").read_bytes()


def test_dialog_refuses_existing_files_and_bad_settings(window, tmp_path):
    from rigside.gui.dialogs.practice import PracticeDialog
    (tmp_path / "practice.truth.csv").write_text("keep me\n", encoding="utf-8")
    d = PracticeDialog(tmp_path, window)
    try:
        assert not d.ok_button.isEnabled() and "practice.truth.csv" in d.problem.text()
        d.name.setText("other")
        assert d.ok_button.isEnabled() and d.problem.text() == ""
        d.rate_low.setValue(50.0)    # above the top of the range
        assert not d.ok_button.isEnabled() and "firing rate range" in d.problem.text()
        d.rate_low.setValue(1.0)
        d.folder.setText(str(tmp_path / "missing"))
        assert not d.ok_button.isEnabled() and "folder must exist" in d.problem.text()
        d.accept()
        assert d.result() == 0
    finally:
        d.close()
    assert (tmp_path / "practice.truth.csv").read_text(encoding="utf-8") == "keep me\n"


def test_size_estimate_follows_the_settings(window, tmp_path):
    from rigside.gui.dialogs.practice import PracticeDialog
    d = PracticeDialog(tmp_path, window)
    try:
        d.seconds.setValue(10.0)
        d.channels.setValue(4)
        s = d.settings()
        assert s.raw_bytes() == 10 * 30000 * 4 * 2    # int16 samples
        assert f"{s.estimated_bytes() / 1e6:,.1f} MB" in d.size.text()
    finally:
        d.close()


def _point_on_screen(panel, x_rate: float, y_percent: float) -> QPoint:
    vb = panel.plot.getViewBox()
    scene = vb.mapViewToScene(QPointF(np.log10(x_rate), y_percent))
    return panel.plot_widget.mapFromScene(scene)


def test_tradeoff_points_are_the_core_curve_and_a_click_sets_the_threshold(demo_window, qtbot):
    win = demo_window
    panel = win.practice.panel
    assert win.docks["tradeoff"].isVisible()
    c = panel.curve
    b = win.bench
    direct = tradeoff_curve(b.events, b.analysis.truth, c.thresholds_sigma, b.group_channels, b.analysis.sos)
    np.testing.assert_array_equal(c.hits, direct.hits)
    np.testing.assert_array_equal(c.false_alarms, direct.false_alarms)
    x, y = panel.points.getData()
    np.testing.assert_allclose(10 ** x, np.maximum(direct.false_alarms_per_s, 0.5 / direct.duration_s))
    np.testing.assert_allclose(y, 100 * direct.miss_fraction)
    np.testing.assert_allclose(np.diff(c.thresholds_sigma), STEP_SIGMA)

    i = int(np.argmax(c.false_alarms_per_s > 1.0))     # a point well away from the crowded left edge
    target = float(c.thresholds_sigma[i])
    pos = _point_on_screen(panel, float(c.false_alarms_per_s[i]), float(100 * c.miss_fraction[i]))
    qtbot.mouseClick(panel.plot_widget.viewport(), Qt.MouseButton.LeftButton, pos=pos)
    assert b.thresholds_sigma[b.channel] == pytest.approx(target)
    assert panel.hasFocus()
    cx, cy = panel.current.getData()
    assert 10 ** cx[0] == pytest.approx(max(c.false_alarms_per_s[i], 0.5 / c.duration_s))
    assert f"{target:.2f} σ" in panel.reading.text()


def test_arrow_keys_step_the_threshold_while_the_view_has_focus(demo_window, qtbot):
    win = demo_window
    panel = win.practice.panel
    b = win.bench
    panel.setFocus()
    qtbot.waitUntil(panel.hasFocus)
    start, view = float(b.thresholds_sigma[b.channel]), b.view
    qtbot.keyClick(panel, Qt.Key.Key_Up)
    qtbot.keyClick(panel, Qt.Key.Key_Up)
    assert b.thresholds_sigma[b.channel] == pytest.approx(start + 2 * STEP_SIGMA)
    qtbot.keyClick(panel, Qt.Key.Key_Down)
    qtbot.keyClick(panel, Qt.Key.Key_Left)
    qtbot.keyClick(panel, Qt.Key.Key_Right)
    assert b.thresholds_sigma[b.channel] == pytest.approx(start + STEP_SIGMA)
    assert b.view == view           # the window's arrow-key scrolling gave way to the view


def test_hiding_ground_truth_hides_every_truth_view_until_revealed(demo_window, qtbot):
    win = demo_window
    panel, curve = win.practice.panel, win.panels["count_curve"]
    assert curve.truth_plot.isVisible() and panel.plot_widget.isVisible()
    win.actions_by_name["hide_truth"].trigger()
    assert win.actions_by_name["hide_truth"].isChecked()
    assert not curve.truth_plot.isVisible() and not curve.truth_key.isVisible()
    assert not panel.plot_widget.isVisible() and not panel.units.isVisible() and "hidden" in panel.note.text()
    win.bench.show_group(1)       # moving on keeps it hidden
    win.wait_idle(60)
    assert not curve.truth_plot.isVisible() and not panel.plot_widget.isVisible()
    win.actions_by_name["reveal_truth"].trigger()
    assert win.wait_idle(60)
    assert curve.truth_plot.isVisible() and panel.plot_widget.isVisible()
    assert not win.actions_by_name["hide_truth"].isChecked()
    assert panel.curve is not None and panel.units.rowCount() == 3


@pytest.mark.parametrize("suffix", [".png", ".svg"])
def test_summary_is_one_page_with_the_curve_and_the_settings(demo_window, tmp_path, suffix):
    win = demo_window
    files = win.practice.save(tmp_path / f"lesson{suffix}")
    assert [f.name for f in files] == [f"lesson{suffix}", "lesson.csv", "lesson.settings.toml"]
    if suffix == ".png":
        image = QImage(str(files[0]))
        assert (image.width(), image.height()) == (PAGE.width(), PAGE.height())
    else:
        text = files[0].read_text(encoding="utf-8")
        assert text.lstrip().startswith("<?xml") and "<svg" in text and "Practice summary" in text
    rows = list(csv.DictReader(open(files[1], newline="", encoding="utf-8")))
    c = win.practice.panel.curve
    assert [int(r["misses"]) for r in rows] == c.misses.tolist()
    assert [float(r["threshold_sigma"]) for r in rows] == pytest.approx(c.thresholds_sigma.tolist())
    assert SynthSettings.load(files[2]) == SynthSettings(seconds=4.0)   # the bundled demo's settings


def test_summary_that_cannot_be_written_is_a_message(demo_window, tmp_path):
    win = demo_window
    out = tmp_path / "out"
    out.mkdir()
    assert win.practice.save(out / "missing" / "lesson.png") is None
    assert win.last_error[0] == "Cannot save the practice summary"
    assert win.practice.save(out / "lesson.jpg") is None and "png or .svg" in win.last_error[1]
    assert list(out.iterdir()) == []
    beside = sorted(p.name for p in demo_path().parent.iterdir())
    assert win.practice.save(demo_path().parent / "demo.truth.png") is None   # its CSV would be the truth file
    assert "must not replace the recording's own files" in win.last_error[1]
    assert sorted(p.name for p in demo_path().parent.iterdir()) == beside
