"""Session files in the window: save, open, autosave, and the recovery offer.

Saving writes a snapshot of the session on the job runner (so curation can go on); only one
file job runs at a time. Autosave goes through :class:`rigside.core.units.session_recovery.Autosaver` a few
seconds after changes. A session that was never saved autosaves under the window's own
folder, named after its recording, and is offered again when that recording is opened.
Opening checks the recording before anything is computed: a moved file is asked for, a
changed file is reported and nothing is loaded.
"""

from __future__ import annotations

import weakref
from pathlib import Path

from PySide6.QtCore import QEvent, QObject, QTimer
from PySide6.QtWidgets import QApplication, QFileDialog, QMessageBox
from shiboken6 import isValid

from rigside.core.errors import RigsideError, SessionError
from rigside.core.io.atomic import check_output
from rigside.core.quality.stored_numbers import current_numbers, numbers_to_store
from rigside.core.units.history import rebuild_history
from rigside.core.units.session import (
    RecordingChanged,
    RecordingMoved,
    autosave_path,
    check_recording_content,
    load_session,
    save_session,
    snapshot,
)
from rigside.core.units.session_recovery import Autosaver, find_states
from rigside.gui.save_folder import remember_folder, suggested_path

AUTOSAVE_INTERVAL_S = 5.0
AUTOSAVE_CHECK_MS = 1500
FILE_SLOT = "session_file"
SESSION_FILTER = "rigside sessions (*.h5);;All files (*)"


def _load_job(path: Path, override, progress=None, cancel=None):
    """Load a session (quick recording check), rebuild the undo history from the journal and take
    its stored quality numbers still current, off the GUI thread: ``(session, history, numbers)``; the
    expected refusals come back as values (their kind matters). The whole-content check runs after the
    session is shown (:func:`_content_job`)."""
    try:
        session = load_session(path, recording_path_override=override)
    except (RecordingMoved, RecordingChanged, SessionError) as exc:
        return exc
    return session, rebuild_history(session.sorting, progress, cancel), current_numbers(session)


def _content_job(session, progress=None, cancel=None):
    """Hash the session's recording whole (the full check): None, or the :class:`RecordingChanged`."""
    try:
        check_recording_content(session, progress, cancel)
    except RecordingChanged as exc:
        return exc
    return None


def _save_job(path: Path, session, numbers: dict, progress=None, cancel=None):
    session.unit_numbers = numbers_to_store(session, numbers)
    try:
        return save_session(path, session)
    except OSError as exc:
        raise SessionError(f"session file must be writable, got {exc}") from None


def _autosave_job(autosaver: Autosaver, session, numbers: dict, force: bool, progress=None, cancel=None):
    session.unit_numbers = numbers_to_store(session, numbers)
    try:
        return autosaver.save_if_due(session, force=force)
    except OSError as exc:
        raise SessionError(f"autosave file must be writable, got {exc}") from None


def default_name(session) -> Path:
    """Suggested session file: beside the recording (never the recording itself), or in the folder
    used last or the documents folder when the recording's folder is the program's or read-only."""
    rec = Path(session.recording.path)
    return suggested_path(rec, rec.stem + ".session.h5")


def untitled_path(folder: Path, recording) -> Path:
    """Where a never-saved session of ``recording`` autosaves (``<this>.autosave.h5``)."""
    stem = "".join(c if c.isalnum() or c in "-_" else "_" for c in Path(recording.path).stem)[:60]
    return folder / f"untitled-{stem}-{recording.fingerprint().split(':')[-1][:12]}.h5"


class SessionFlow(QObject):
    """Files of the controller's session. ``ask(title, text) -> bool`` and
    ``pick_file(title, start, filter) -> str`` are attributes so tests can answer them."""

    def __init__(self, controller, autosave_folder: Path):
        super().__init__(controller)
        self.ctl = controller
        self.window = controller.window
        self.autosave_folder = Path(autosave_folder)
        self.path: Path | None = None
        self.autosaver: Autosaver | None = None
        self.recovered = False
        self._file_job = None
        self._written: tuple[object, int] | None = None   # (sorting, revision) last sent to disk
        self._last_autosave = -float("inf")
        self._pending_open = False
        self._incoming_path: Path | None = None
        self.check_content = True       # hash an opened session's recording whole (off for screenshots)
        self.ask = self._ask
        self.pick_file = self._pick_file
        self.timer = QTimer(self, interval=AUTOSAVE_CHECK_MS)
        self.timer.timeout.connect(self.autosave_if_due)
        self.timer.start()
        controller.replacing.connect(self.save_now_if_dirty)
        controller.sorting_replaced.connect(self._on_replaced)
        controller.units_changed.connect(self._on_changed)
        self.clean = True
        controller.undo_stack.cleanChanged.connect(self._on_clean)
        self.window.bench.recording_changed.connect(self._on_recording_changed)
        self.window.installEventFilter(self)

    # ---- dialogs (replaceable) ----------------------------------------------------------------
    def _ask(self, title: str, text: str) -> bool:
        if not self.window.interactive:
            return False
        answer = QMessageBox.question(self.window, title, text)
        return answer == QMessageBox.StandardButton.Yes

    def _pick_file(self, title: str, start: str, filter_text: str, save: bool = False) -> str:
        if not self.window.interactive:
            return ""
        fn = QFileDialog.getSaveFileName if save else QFileDialog.getOpenFileName
        return fn(self.window, title, start, filter_text)[0]

    # ---- state --------------------------------------------------------------------------------
    @property
    def autosave_file(self) -> Path | None:
        return None if self.autosaver is None else autosave_path(self.autosaver.path)

    def _on_replaced(self) -> None:
        s = self.ctl.session
        self.path, self._incoming_path = self._incoming_path, None
        self.recovered = False
        self.autosaver = None
        if s is not None and (self.path is not None or self.window.interactive):
            if self.path is None:
                self.autosave_folder.mkdir(parents=True, exist_ok=True)
            base = self.path or untitled_path(self.autosave_folder, self.window.bench.recording)
            self.autosaver = Autosaver(base, AUTOSAVE_INTERVAL_S)
            if s.source is None:     # a new sorting: nothing of it is on disk yet
                self.autosaver.mark_changed()
        self.update_title()

    def _on_changed(self, _change) -> None:
        if self.autosaver is not None:
            self.autosaver.mark_changed()
        self.update_title()

    def _on_clean(self, clean: bool) -> None:
        self.clean = bool(clean)
        if isValid(self.window):      # the stack also says so while the window is being destroyed
            self.update_title()

    def update_title(self) -> None:
        s = self.ctl.session
        if s is None:
            return
        name = self.path.name if self.path is not None else "unsaved units"
        dirty = "" if self.clean and self.path is not None and not self.recovered else " *"
        rec = Path(s.recording.path).name
        self.window.setWindowTitle(f"rigside — {rec} — {name}{dirty}")

    def _wait_file_job(self) -> None:
        job = self._file_job() if self._file_job is not None else None
        if job is not None and self.window.runner.busy(FILE_SLOT):
            job.wait()
            QApplication.processEvents()

    # ---- autosave ----------------------------------------------------------------------------
    def autosave_if_due(self, force: bool = False) -> bool:
        """Start an autosave (off the GUI thread) when there are unsaved changes and the
        autosaver's interval has passed since the last one."""
        s, saver = self.ctl.session, self.autosaver
        if s is None or saver is None or self.window.runner.busy(FILE_SLOT):
            return False
        self._remark(s, saver)
        now = saver.clock()
        if not saver.dirty or (not force and now - self._last_autosave < saver.interval_s):
            return False
        self._last_autosave = now
        self._written = (s.sorting, s.sorting.revision)
        self._file_job = weakref.ref(self.window.runner.submit(
            FILE_SLOT, "Autosaving", _autosave_job, saver, snapshot(s), self.ctl.current_metrics(), True,
            on_done=lambda out: self.window.statusBar().showMessage(f"Autosaved to {out.name}", 4000)))
        return True

    def _remark(self, session, saver: Autosaver) -> None:
        """Mark changes made while the last snapshot was being written (the writer cleared the flag)."""
        if self._written is not None and self._written[0] is session.sorting \
                and self._written[1] != session.sorting.revision:
            saver.mark_changed()

    def save_now_if_dirty(self) -> None:
        """Write the autosave at once (closing the window, replacing the session)."""
        s, saver = self.ctl.session, self.autosaver
        self._wait_file_job()
        if s is not None and saver is not None:
            self._remark(s, saver)
        if s is not None and saver is not None and saver.dirty:
            try:
                _autosave_job(saver, snapshot(s), self.ctl.current_metrics(), True)
                self._written = (s.sorting, s.sorting.revision)
            except RigsideError as exc:
                self.window.show_error("Autosave failed", str(exc))

    def eventFilter(self, obj, event) -> bool:
        if obj is self.window and event.type() == QEvent.Type.Close:
            self.save_now_if_dirty()
        return False

    def _on_recording_changed(self) -> None:
        s, rec = self.ctl.session, self.window.bench.recording
        if s is not None and rec is not None and Path(rec.path).resolve() == Path(s.recording.path).resolve():
            return
        if s is not None:
            self.ctl.attach(None)         # its unsaved changes go to its autosave first
        if rec is not None and not self._pending_open:
            QTimer.singleShot(0, lambda r=rec: self._offer_untitled(r))

    def _offer_untitled(self, recording) -> None:
        if recording is not self.window.bench.recording or self.ctl.session is not None:
            return
        base = untitled_path(self.autosave_folder, recording)
        states = [s for s in find_states(base) if s.error is None]
        if states and self.ask("Unsaved units found",
                               f"Units of this recording were autosaved on {states[0].saved_utc[:19]} UTC "
                               f"but never saved as a session. Open them?"):
            self._start_load(states[0].path, None, title_path=None)

    # ---- saving ------------------------------------------------------------------------------
    def save(self, path: str | Path | None = None) -> bool:
        """Save the session (asking for a file when it has none); returns False if not started."""
        s = self.ctl.session
        if s is None:
            self.window.show_error("Nothing to save", "saving needs units, got none (cluster first)")
            return False
        if path is None:
            path = self.path or self.pick_file("Save the session", str(default_name(s)), SESSION_FILTER, save=True)
        if not path:
            return False
        try:
            path = check_output(path, s.recording.path, suffixes=(".h5",))
        except RigsideError as exc:
            self.window.show_error("Cannot save the session", str(exc))
            return False
        if self.window.interactive:
            remember_folder(path.parent)
        self._wait_file_job()
        index, revision, old_autosave = self.ctl.undo_stack.index(), s.sorting.revision, self.autosave_file
        self._written = (s.sorting, revision)
        self._file_job = weakref.ref(self.window.runner.submit(
            FILE_SLOT, "Saving the session", _save_job, path, snapshot(s), self.ctl.current_metrics(),
            on_done=lambda out: self._saved(s, out, index, revision, old_autosave)))
        return True

    def save_as(self) -> bool:
        s = self.ctl.session
        if s is None:
            return self.save()
        start = str(self.path or default_name(s))
        path = self.pick_file("Save the session as", start, SESSION_FILTER, save=True)
        return self.save(path) if path else False

    def _saved(self, session, out: Path, index: int, revision: int, old_autosave: Path | None) -> None:
        if session is not self.ctl.session:
            return
        if old_autosave is not None and old_autosave != autosave_path(out):
            old_autosave.unlink(missing_ok=True)
        session.source = self.path = Path(out)
        self.recovered = False
        self.autosaver = Autosaver(out, AUTOSAVE_INTERVAL_S)
        if session.sorting.revision != revision:
            self.autosaver.mark_changed()
        if self.ctl.undo_stack.index() == index:
            self.ctl.undo_stack.setClean()
        self.update_title()
        self.window.remember(str(Path(out).resolve()))
        self.window.statusBar().showMessage(f"Session saved to {out}", 8000)

    # ---- opening -----------------------------------------------------------------------------
    def choose_and_open(self) -> bool:
        path = self.pick_file("Open a session", str(self.path.parent) if self.path else "", SESSION_FILTER)
        return self.open(path) if path else False

    def open(self, path: str | Path, recording: str | Path | None = None) -> bool:
        """Open a session, offering a newer autosave or backup when there is one; ``recording`` is
        where its recording is now (a moved file: it must be the same recording)."""
        path = Path(path)
        states = find_states(path)
        valid = [s for s in states if s.error is None]
        if not states:
            self.window.show_error("Cannot open the session", f"session file must exist, got no file at {path}")
            return False
        if not valid:
            self.window.show_error("Cannot open the session", "; ".join(f"{s.kind}: {s.error}" for s in states))
            return False
        main = next((s for s in states if s.kind == "main"), None)
        choice = next((s for s in valid if s.kind == "main"), None)
        newest = valid[0]
        if main is None or main.error is not None:
            reason = "is missing" if main is None else f"cannot be read ({main.error})"
            if not self.ask("Recover the session?", f"The session file {reason}. A consistent {newest.kind} "
                            f"copy saved on {newest.saved_utc[:19]} UTC exists. Open it?"):
                if main is not None:
                    self.window.show_error("Cannot open the session", main.error)
                return False
            choice = newest
        elif newest is not choice and newest.saved_utc > choice.saved_utc and self.ask(
                "Open the newer state?", f"A newer {newest.kind} of this session exists (saved "
                f"{newest.saved_utc[:19]} UTC; the session file was saved {choice.saved_utc[:19]} UTC). "
                "Open the newer state?"):
            choice = newest
        self._start_load(choice.path, recording, title_path=path)
        return True

    def _start_load(self, file: Path, override, title_path: Path | None) -> None:
        self._wait_file_job()
        self.window.runner.submit("session_open", "Opening the session", _load_job, Path(file), override,
                                  on_done=lambda r: self._loaded(r, file, title_path))

    def _loaded(self, result, file: Path, title_path: Path | None) -> None:
        if isinstance(result, RecordingMoved):
            found = self.pick_file(f"Where is the recording {Path(result.recorded_path).name}?",
                                   str(Path(result.recorded_path).parent),
                                   "Recordings (*.bin *.dat *.raw *.h5 *.hdf5);;All files (*)")
            if found:
                self._start_load(file, found, title_path)
            else:
                self.window.show_error("Recording not found", str(result))
            return
        if isinstance(result, RecordingChanged):
            self._report_changed(result, "Nothing was loaded or computed")
            return
        if isinstance(result, SessionError):
            self.window.show_error("Cannot open the session", str(result))
            return
        result, history, numbers = result
        self._pending_open = True
        try:
            if not self.window.open_path(result.recording.path, session=result):
                return
        finally:
            self._pending_open = False
        self._incoming_path = title_path
        self.ctl.attach(result, history, numbers)
        self._apply_threshold(result)
        self.recovered = title_path is not None and Path(file) != title_path
        self.window.remember(str(Path(title_path or file).resolve()))
        self.update_title()
        undo = (f"{len(history)} step(s) can be undone" if history is not None
                else "its journal does not replay to these units, so earlier steps cannot be undone")
        self.window.statusBar().showMessage(f"Opened {Path(file).name}: {len(result.sorting.units)} units; "
                                            f"{undo}.", 10000)
        if result.recording.content_hash and self.check_content:
            self.window.runner.submit("session_content", "Checking the recording's content", _content_job, result,
                                      on_done=lambda r: self._content_checked(r, result))

    def _content_checked(self, changed, session) -> None:
        """The whole-content check of an opened session's recording came back: a changed recording
        closes the session (its stored events would not be this file's)."""
        if changed is None or self.ctl.session is not session:
            return
        self.ctl.attach(None)
        self._report_changed(changed, "The session was closed without saving")

    def _report_changed(self, changed: RecordingChanged, outcome: str) -> None:
        self.window.show_error("The recording has changed",
                               f"{changed} {outcome}; open the original recording file, or start a new "
                               f"sorting of this one.")

    def _apply_threshold(self, session) -> None:
        d = session.params.detect
        if d.threshold_uv is None:
            bench = self.window.bench
            scope = bench.scope
            bench.set_scope("all")
            bench.set_threshold(d.threshold_sigma, final=True, scale="sigma")
            bench.set_scope(scope)
