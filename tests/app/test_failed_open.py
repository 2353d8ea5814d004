"""After a failed open no panel keeps showing the previous recording's numbers."""

from __future__ import annotations

import numpy as np

from tests.app.units_helpers import cluster_demo


def write_nan_recording(path, nan_at: int, channels: int = 4, seconds: float = 2.0, rate: float = 30000.0) -> None:
    """A float32 recording that opens but holds NaN samples from ``nan_at`` on channel 1."""
    x = np.random.default_rng(2).normal(0, 20, size=(int(seconds * rate), channels)).astype(np.float32)
    x[nan_at:nan_at + 10, 1] = np.nan
    x.tofile(path)
    path.with_name(path.stem + ".rigside.toml").write_text(
        f"[recording]\nchannels = {channels}\nrate_hz = {rate}\ndtype = \"float32\"\n")


def shown_numbers(win) -> dict:
    """What the panels show that came from a detection or a sorting."""
    th = win.panels["threshold"]
    model = th.table_model
    return {"summary": th.summary.text(),
            "counts": [model.data(model.index(r, 5)) for r in range(model.rowCount())],
            "trace_points": len(win.traces.curve.getData()[0] if win.traces.curve.getData()[0] is not None else []),
            "rate_bins": len(win.panels["rate"].rate.getData()[1]) if "rate" in win.panels else 0,
            "features": len(win.panels["features"].scatter.data),
            "waveforms": win.panels["waveforms"].snippets is not None,
            "units": win.units.sorting is not None}


def close_messages(win) -> None:
    for m in list(win.messages):
        m.close()


def test_a_recording_that_cannot_be_shown_clears_every_panel(demo_window, tmp_path, monkeypatch):
    win = demo_window
    cluster_demo(win)
    before = shown_numbers(win)
    assert before["units"] and before["trace_points"] and any(c not in ("0", "…") for c in before["counts"])
    bad = tmp_path / "nan_at_start.bin"
    write_nan_recording(bad, nan_at=1000)
    monkeypatch.undo()                       # the real detection from here on
    assert not win.open_path(str(bad))
    assert win.wait_idle(60)
    close_messages(win)
    after = shown_numbers(win)
    assert "cannot be shown" in after["summary"] and "NaN" in after["summary"]
    assert "nan_at_start.bin" in win.windowTitle() and "demo" not in win.windowTitle()
    assert after["counts"] == ["…"] * 4      # the new recording's channels, nothing counted
    assert after["trace_points"] == 0 and after["features"] == 0
    assert not after["waveforms"] and not after["units"]
    assert win.analysis_outcome == "failed"


def test_a_failed_detection_says_so_instead_of_the_old_counts(demo_window, tmp_path, monkeypatch):
    win = demo_window
    old_summary = win.panels["threshold"].summary.text()
    bad = tmp_path / "nan_late.bin"
    write_nan_recording(bad, nan_at=170000, seconds=6.0)  # the first view reads fine, detection meets the NaN
    monkeypatch.undo()
    assert win.open_path(str(bad))
    assert win.wait_idle(60)
    close_messages(win)
    after = shown_numbers(win)
    assert win.analysis_outcome == "failed"
    assert after["summary"] != old_summary and after["summary"].startswith("Detection failed:")
    assert "NaN" in after["summary"]
    assert after["counts"] == ["…"] * 4 and after["features"] == 0 and not after["units"]
