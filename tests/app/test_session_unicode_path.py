"""The window opens a recording and saves and reopens its session in a folder and under file names
with spaces and non-ASCII letters (common practice, no source)."""

from __future__ import annotations

import shutil

from rigside.sample_data import demo_path
from tests.app.units_helpers import biggest_unit, cluster_demo


def test_session_saved_and_reopened_on_a_non_ascii_path(demo_window, tmp_path):
    win = demo_window
    ctl = win.units
    src = demo_path()
    folder = tmp_path / "réc données ü"
    folder.mkdir()
    for p in src.parent.glob(src.stem + ".*"):
        shutil.copy(p, folder / ("séance 1" + p.name[len(src.stem):]))
    rec = folder / ("séance 1" + src.suffix)
    assert win.open_path(str(rec))
    assert win.wait_idle(60)
    assert str(win.bench.recording.path) == str(rec)
    cluster_demo(win)
    unit = biggest_unit(ctl)
    assert ctl.relabel([unit], "single unit")
    path = folder / "séance 1.h5"
    assert ctl.files.save(path)
    assert win.wait_idle(60)
    assert path.exists() and ctl.files.path == path
    assert win.windowTitle().endswith("séance 1.h5")
    saved = ctl.sorting.copy()
    assert ctl.relabel([unit], "multi-unit")
    assert ctl.files.open(path)
    assert win.wait_idle(60)
    assert ctl.sorting.state_equal(saved)
    assert ctl.sorting.unit(unit).label == "single unit"
    assert str(win.bench.recording.path) == str(rec)
