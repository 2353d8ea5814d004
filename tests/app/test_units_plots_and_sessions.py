"""Quality plots of the selected units, and sessions in the window: save, reopen, autosave, recovery."""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
from PySide6.QtCore import Qt

from rigside.core.units.history import replay_matches
from rigside.core.units.session import autosave_path, file_fingerprint
from rigside.gui import palette, session_flow
from rigside.gui.screenshot import capture, colour_share, pixels
from rigside.gui.settings_store import settings
from rigside.gui.sorting_controller import SELECTION_COLOURS
from rigside.gui.window import MainWindow
from rigside.sample_data import demo_path
from tests.app.conftest import copy_sample
from tests.app.units_helpers import biggest_unit, cluster_demo, select_biggest_pair


def brute_force_lags(a: np.ndarray, b: np.ndarray, bin_s: float, window_s: float) -> np.ndarray:
    """Every pair's lag counted in half-open bins (common practice, no source)."""
    n = int(round(window_s / bin_s))
    lags = (b[None, :] - a[:, None]).ravel()
    k = np.floor(lags / bin_s).astype(np.int64) + n
    return np.bincount(k[(k >= 0) & (k < 2 * n)], minlength=2 * n)


def test_quality_plots_show_the_selected_units(demo_window, qtbot, tmp_path):
    win = demo_window
    ctl = win.units
    cluster_demo(win)
    s = ctl.sorting
    pair = select_biggest_pair(win)
    counts, group = s.counts(), s.unit(pair[0]).group
    plots = win.unit_panels["plots"]
    # ISI: one outline per unit, the refractory window shaded, violations counted as the core counts them
    mp = ctl.metric_settings()
    assert len(plots.isi.curves) == 2
    assert plots.isi.region.getRegion() == (mp.censored_ms, mp.refractory_ms)
    for u in pair:
        t = np.sort(s.data.time_s[s.events_of(u)])
        isi = np.diff(t)
        assert plots.isi.violations[u] == int(np.sum((isi >= mp.censored_ms / 1e3) & (isi < mp.refractory_ms / 1e3)))
    assert "violation" in plots.isi.status.text()
    # bin size is adjustable: half the bin, twice the bins
    n_edges = len(plots.isi.curves[0].getData()[0])
    plots.isi.bin_ms.setValue(plots.isi.bin_ms.value() / 2)
    assert len(plots.isi.curves[0].getData()[0]) == 2 * (n_edges - 1) + 1
    # cross-correlogram of the pair against a brute-force count
    cg = plots.correlograms
    assert cg.pair == tuple(pair)
    ta, tb = (np.sort(s.data.time_s[s.events_of(u)]) for u in pair)
    bin_s, window_s = cg.bin_ms.value() / 1e3, cg.window_ms.value() / 1e3
    assert np.array_equal(cg.cross_counts, brute_force_lags(ta, tb, bin_s, window_s))
    assert cg.cross_counts.sum() > 0
    # amplitude over time: every event, and the threshold in µV on each unit's main channel
    amp = plots.amplitude
    assert amp.n_points == counts[pair[0]] + counts[pair[1]]
    thr = ctl.thresholds()
    for u in pair:
        ch = int(ctl.metrics[u]["main_channel"])
        assert amp.thresholds_uv[u] == thr[ch] * ctl.events.sigma_uv[ch]
    # waveforms: cut off the GUI thread, a subset of each unit on every channel of its group
    wf = plots.waveforms
    assert set(wf.snippets) == set(pair)
    for u in pair:
        snips, channels = wf.snippets[u]
        assert snips.shape[0] == min(counts[u], wf.per_unit.value())
        assert list(channels) == list(win.bench.recording.groups[group])
        assert np.abs(snips).max() > 0
    # one colour per selected unit: the unit list's swatch and the plots use the same
    model = win.unit_panels["list"].model
    assert SELECTION_COLOURS[:2] == (palette.GREEN, palette.ORANGE)   # our own start in the Okabe-Ito set
    for u, colour in zip(pair, SELECTION_COLOURS):
        swatch = model.data(model.index(model.row_of(u), 0), Qt.ItemDataRole.DecorationRole)
        assert (swatch.red(), swatch.green(), swatch.blue()) == colour
    # other views can find the selected units' events in the workbench's own event table
    rows = ctl.selected_rows()
    for u in pair:
        mine = s.events_of(u)
        assert len(rows[u]) == len(mine)
        assert np.array_equal(np.sort(win.bench.events.sample[rows[u]]), np.sort(ctl.events.sample[mine]))
    # the selection colours appear in the plots
    image = pixels(capture(plots, str(tmp_path / "plots.png")))
    for colour in SELECTION_COLOURS[:2]:
        assert colour_share(image, colour, tolerance=30) > 0.0005
    # axes carry units
    assert "(ms)" in plots.isi.plot.getPlotItem().getAxis("bottom").labelText
    assert "µV" in amp.plot.getPlotItem().getAxis("left").labelText


def test_save_then_reopen_the_session(demo_window, tmp_path):
    win = demo_window
    ctl = win.units
    cluster_demo(win)
    unit = biggest_unit(ctl)
    assert ctl.relabel([unit], "single unit")
    assert not ctl.files.save(win.bench.recording.path)     # never over the raw recording
    assert "must end in .h5" in win.last_error[1]
    path = tmp_path / "curated.h5"
    assert ctl.files.save(path)
    assert win.wait_idle(60)
    assert path.exists() and ctl.files.path == path and ctl.undo_stack.isClean()
    assert win.windowTitle().endswith("curated.h5")
    saved = ctl.sorting.copy()
    assert ctl.relabel([unit], "multi-unit")
    assert win.windowTitle().endswith("*")
    assert ctl.files.open(path)
    assert win.wait_idle(60)
    assert ctl.sorting.state_equal(saved)
    assert ctl.sorting.unit(unit).label == "single unit"
    assert ctl.files.path == path
    assert sorted(ctl.metrics) == sorted(u for u, n in ctl.sorting.counts().items() if n > 0)
    assert win.unit_panels["list"].model.rowCount() == len(saved.units) + len(saved.pool_counts())
    # the replayed journal gives the same units
    assert replay_matches(ctl.sorting)


def test_autosave_after_changes_is_offered_when_reopening(demo_window, tmp_path, monkeypatch):
    win = demo_window
    ctl = win.units
    monkeypatch.setattr(session_flow, "AUTOSAVE_INTERVAL_S", 0.0)
    cluster_demo(win)
    path = tmp_path / "work.h5"
    ctl.files.save(path)
    assert win.wait_idle(60)
    unit = biggest_unit(ctl)
    assert ctl.relabel([unit], "not neural")
    assert ctl.files.autosave_if_due()
    assert win.wait_idle(60)
    assert autosave_path(path).exists()
    questions = []
    ctl.files.ask = lambda title, text: questions.append(text) or True
    assert ctl.files.open(path)
    assert win.wait_idle(60)
    assert questions and "newer autosave" in questions[0]
    assert ctl.sorting.unit(unit).label == "not neural"
    assert ctl.files.recovered and win.windowTitle().endswith("*")


def test_a_corrupted_session_is_refused_with_a_message(window, tmp_path):
    bad = tmp_path / "broken.h5"
    bad.write_bytes(b"\x89HDF\r\n\x1a\n" + b"\x00" * 200)
    assert not window.units.files.open(bad)
    title, message = window.last_error
    assert title == "Cannot open the session" and "session file" in message
    assert window.messages and window.messages[-1].isVisible()
    assert window.units.sorting is None


def test_moved_recording_is_asked_for_and_changed_one_is_refused(demo_window, tmp_path):
    win = demo_window
    ctl = win.units
    rec = copy_sample(demo_path(), tmp_path / "rec")
    assert win.open_path(str(rec))
    assert win.wait_idle(60)
    cluster_demo(win)
    path = tmp_path / "s.h5"
    ctl.files.save(path)
    assert win.wait_idle(60)
    saved = ctl.sorting.copy()
    moved = tmp_path / "elsewhere"
    rec.parent.rename(moved)
    asked = []
    ctl.files.pick_file = lambda title, *a, **k: asked.append(title) or str(moved / rec.name)
    assert ctl.files.open(path)
    assert win.wait_idle(60)
    assert asked and "Where is the recording" in asked[0]
    assert ctl.sorting.state_equal(saved)
    assert str(win.bench.recording.path) == str(moved / rec.name)
    # a changed recording: the whole-content check runs after the session is shown and closes it with
    # a message; the byte changed lies outside the blocks the quick fingerprint reads, so only the
    # whole-content hash sees it
    before = file_fingerprint(moved / rec.name)
    with open(moved / rec.name, "r+b") as fh:     # in place: the window still has the file open
        fh.seek(1_200_000)
        old = fh.read(1)
        fh.seek(1_200_000)
        fh.write(bytes([old[0] ^ 0xFF]))
    assert file_fingerprint(moved / rec.name) == before
    ctl.files.pick_file = lambda title, *a, **k: str(moved / rec.name)
    win.units.attach(None)
    assert ctl.files.open(path)
    assert win.wait_idle(60)
    title, message = win.last_error
    assert title == "The recording has changed" and "changed" in message
    assert ctl.sorting is None


def test_a_damaged_session_file_offers_its_backup(demo_window, tmp_path):
    win = demo_window
    ctl = win.units
    cluster_demo(win)
    path = tmp_path / "kept.h5"
    ctl.files.save(path)
    assert win.wait_idle(60)
    first = ctl.sorting.copy()
    assert ctl.relabel([biggest_unit(ctl)], "multi-unit")
    ctl.files.save(path)                       # the first save becomes the backup
    assert win.wait_idle(60)
    with h5py.File(path, "r") as f:           # damage the main file inside its stored assignments
        offset = f["sorting/assignments"].id.get_offset()
    with open(path, "r+b") as fh:
        fh.seek(offset)
        fh.write(b"\xff" * 64)
    questions = []
    ctl.files.ask = lambda title, text: questions.append(text) or True
    assert ctl.files.open(path)
    assert win.wait_idle(60)
    assert questions and "cannot be read" in questions[0] and "backup" in questions[0]
    assert ctl.sorting.state_equal(first)
    assert ctl.files.recovered


def test_units_never_saved_are_offered_when_their_recording_opens_again(demo_window, qtbot):
    win = demo_window
    ctl = win.units
    cluster_demo(win)
    assert ctl.relabel([biggest_unit(ctl)], "single unit")
    assert ctl.files.path is None and ctl.files.autosave_if_due(force=True)
    assert win.wait_idle(60)
    kept = ctl.sorting.copy()
    autosaved = ctl.files.autosave_file
    assert autosaved.exists() and autosaved.parent.parent == Path(settings().fileName()).parent
    win.close()                      # as after a crash: the units were never saved as a session
    second = MainWindow()
    qtbot.addWidget(second)
    second.show()
    questions = []
    second.units.files.ask = lambda title, text: questions.append(title) or True
    try:
        assert second.open_demo()
        assert second.wait_idle(60) and second.wait_idle(60)
        assert questions == ["Unsaved units found"]
        assert second.units.sorting is not None and second.units.sorting.state_equal(kept)
        assert second.units.files.path is None
    finally:
        second.close()
