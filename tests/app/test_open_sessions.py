"""Sessions written by `rigside sort` open in the window from the command line, by their layout,
with their units, labels, notes and undo history, and without detecting again."""

from __future__ import annotations

import shutil

import h5py
import numpy as np
import pytest
from PySide6.QtCore import QMimeData, QPointF, Qt, QUrl
from PySide6.QtGui import QDragEnterEvent, QDropEvent
from PySide6.QtWidgets import QFileDialog

from rigside.cli.main import main
from rigside.core.units.session import load_session
from rigside.gui import screenshot
from rigside.gui.panels.units import POOL_LABEL
from rigside.gui.screenshot import pixels
from rigside.gui.workers import Runner
from rigside.sample_data import demo_path
from tests.app.conftest import copy_sample, sorted_copy

DETECTION_SLOTS = {"analysis", "features"}


@pytest.fixture(scope="module")
def sorted_session(tmp_path_factory):
    """A copy of the demo and the session `rigside sort` wrote of it (once for the module)."""
    return sorted_copy(demo_path(), tmp_path_factory.mktemp("sorted"), "demo-sorted.h5")


@pytest.fixture
def submitted(monkeypatch):
    """The slots of every job submitted to any window's runner."""
    slots: list[str] = []
    original = Runner.submit

    def spy(self, slot, *args, **kwargs):
        slots.append(slot)
        return original(self, slot, *args, **kwargs)
    monkeypatch.setattr(Runner, "submit", spy)
    return slots


@pytest.fixture
def rendered(monkeypatch):
    """What the window held when `rigside open --screenshot` rendered it."""
    seen: dict = {}
    original = screenshot.capture

    def spy(win, path):
        image = original(win, path)
        ctl = win.units
        table = win.unit_panels["list"].table
        seen.update(sorting=None if ctl.sorting is None else ctl.sorting.copy(),
                    undo=[ctl.undo_stack.text(i) for i in range(ctl.undo_stack.count())],
                    recording=str(win.bench.recording.path), image=pixels(image),
                    rows=[[table.model().index(r, c).data() for c in range(3)]
                          for r in range(table.model().rowCount())],
                    table_box=table.viewport().rect().translated(table.viewport().mapTo(win, table.rect().topLeft())),
                    table_visible=table.isVisible(), events=win.bench.events)
        return image
    monkeypatch.setattr(screenshot, "capture", spy)
    return seen


def test_a_sorted_session_opens_from_the_command_line_as_the_window_left_it(
        window, sorted_session, submitted, rendered, tmp_path):
    rec, session = sorted_session
    win, ctl = window, window.units
    ctl.files.timer.stop()
    assert win.open_path(str(session))                   # recognised by its layout, not its name
    assert win.wait_idle(60) and win.last_error is None
    assert not DETECTION_SLOTS & set(submitted), submitted
    assert ctl.sorting.state_equal(load_session(session).sorting)
    assert win.bench.events is ctl.session.events        # traces, threshold and counts use the stored events
    counts = ctl.sorting.counts()
    group = ctl.sorting.unit(max(counts, key=counts.get)).group
    big = sorted((u for u in counts if ctl.sorting.unit(u).group == group), key=counts.get)[-2:]
    assert ctl.merge(big)
    assert win.wait_idle(60)
    new = next(u for u in ctl.sorting.unit_ids() if u in big)
    assert ctl.relabel([new], "single unit")
    assert ctl.set_note(new, "clean, stable")
    curated = tmp_path / "curated.h5"
    assert ctl.files.save(curated)
    assert win.wait_idle(60)
    undo = [ctl.undo_stack.text(i) for i in range(ctl.undo_stack.count())]
    # the overlap pass of sort is the first undoable step, then the three curation steps
    assert len(undo) == 4 and undo[0].endswith("after the overlap pass")
    assert str(curated.resolve()) == win.recent_files()[0]
    submitted.clear()
    out = tmp_path / "shot.png"
    renamed = tmp_path / "curated.bin"                     # a name that says nothing of the layout
    shutil.copy(curated, renamed)
    assert main(["open", str(renamed), "--screenshot", str(out)]) == 0
    assert out.exists()
    assert not DETECTION_SLOTS & set(submitted), submitted
    assert rendered["sorting"].state_equal(ctl.sorting)
    merged = rendered["sorting"].unit(new)
    assert (merged.label, merged.note) == ("single unit", "clean, stable")
    assert rendered["undo"] == undo


def test_the_screenshot_shows_the_unit_list(sorted_session, rendered, tmp_path):
    _, session = sorted_session
    out = tmp_path / "session.png"
    assert main(["open", str(session), "--screenshot", str(out)]) == 0
    stored = load_session(session, check_recording=False).sorting
    units = [r for r in rendered["rows"] if r[2] != POOL_LABEL]
    assert sorted(int(r[0]) for r in units) == stored.unit_ids()
    assert {r[2] for r in units} == {stored.unit(u).label for u in stored.unit_ids()}
    assert len(rendered["rows"]) - len(units) == len(stored.pool_counts())   # one row per group's unassigned events
    assert rendered["table_visible"]
    box = rendered["table_box"]
    area = rendered["image"][box.top():box.bottom(), box.left():box.right()]
    assert area.size and area.std() > 10                  # the list is drawn in the picture, not blank


def test_a_session_whose_recording_moved_opens_with_session(sorted_session, rendered, tmp_path, capsys):
    rec, session = sorted_session
    moved = copy_sample(demo_path(), tmp_path / "moved")
    s2 = tmp_path / "s.h5"
    shutil.copy(session, s2)
    for part in session.parent.glob(session.name + ".static-*"):   # a session is copied with its static part
        shutil.copy(part, tmp_path / part.name)
    original = rec.parent.rename(rec.parent.with_name("gone"))
    try:
        assert main(["open", str(s2), "--screenshot", str(tmp_path / "a.png")]) == 1
        assert "moved or renamed" in capsys.readouterr().err
        assert main(["open", str(moved), "--session", str(s2), "--screenshot", str(tmp_path / "b.png")]) == 0
    finally:
        original.rename(rec.parent)
    assert rendered["recording"] == str(moved.resolve())
    assert rendered["sorting"].state_equal(load_session(session).sorting)


def test_a_file_of_another_layout_gets_one_line(tmp_path, capsys, sorted_session):
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f.attrs["format"] = "something else"
        f.create_dataset("trace", data=np.zeros(100))
    assert main(["open", str(other)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "must be a recording" in err and "rigside session" in err and "another layout" in err
    rec, _ = sorted_session
    assert main(["open", str(rec), "--session", str(other)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "session file must be a rigside session" in err


def test_one_open_dialog_recent_files_and_dropping_open_sessions(window, sorted_session, monkeypatch, submitted):
    rec, session = sorted_session
    win = window
    win.units.files.timer.stop()
    shown = []
    monkeypatch.setattr(QFileDialog, "getOpenFileName",
                        lambda parent, title, start, filters: shown.append(filters) or (str(session), ""))
    win.actions_by_name["open"].trigger()
    assert win.wait_idle(60) and win.units.sorting is not None
    assert "Recordings and sessions" in shown[0]
    assert win.recent_files()[0] == str(session.resolve())
    win.units.attach(None)
    assert win.open_path(str(rec)) and win.wait_idle(60)
    assert win.recent_files()[:2] == [str(rec.resolve()), str(session.resolve())]
    assert [a.text() for a in win.recent_menu.actions()][:2] == [str(rec.resolve()), str(session.resolve())]
    submitted.clear()
    mime = QMimeData()
    mime.setUrls([QUrl.fromLocalFile(str(session))])
    enter = QDragEnterEvent(QPointF(10, 10).toPoint(), Qt.DropAction.CopyAction, mime,
                            Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier)
    win.dragEnterEvent(enter)
    assert enter.isAccepted()
    drop = QDropEvent(QPointF(10, 10), Qt.DropAction.CopyAction, mime, Qt.MouseButton.LeftButton,
                      Qt.KeyboardModifier.NoModifier)
    win.dropEvent(drop)
    assert win.wait_idle(60)
    assert win.units.sorting is not None and win.units.files.path == session
    assert not DETECTION_SLOTS & set(submitted)
