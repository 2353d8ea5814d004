"""Starting the window from the command line: on a file or the demo, or rendered to a PNG."""

from __future__ import annotations

import os
import sys
import traceback
from typing import Callable

from PySide6.QtCore import QTimer
from PySide6.QtWidgets import QApplication

from rigside.core.signal.filtering import warm_up
from rigside.gui.window import MainWindow
from rigside.sample_data import demo_path


def _excepthook(kind, value, tb) -> None:
    traceback.print_exception(kind, value, tb, file=sys.stderr)
    app = QApplication.instance()
    win = next((w for w in app.topLevelWidgets() if isinstance(w, MainWindow)), None) if app else None
    if win is not None:
        win.show_error("Something went wrong", f"{kind.__name__}: {value}")


def run_window(path: str | None, *, screenshot: str | None = None, recording_options: dict | None = None,
               demo: bool = False, session: str | None = None) -> int:
    """Open the window (on ``path``, a recording or a session, or the demo; with ``session``, that
    session on the recording ``path``); with ``screenshot``, render to a PNG and exit."""
    if screenshot:
        os.environ["QT_QPA_PLATFORM"] = "offscreen"
    app = QApplication.instance() or QApplication(sys.argv[:1])
    app.setApplicationName("rigside")
    win = MainWindow(interactive=not screenshot)
    win.runner.submit("warm_up", "Preparing the filter", warm_up)   # while the file is read
    target = str(demo_path()) if demo else path

    def open_target() -> bool:
        if session is not None:
            return win.open_session(session, recording=target)
        return win.open_path(target, recording_options)

    if screenshot:
        return _render(win, target, open_target, screenshot)
    sys.excepthook = _excepthook
    win.show()
    if target is not None:
        QTimer.singleShot(0, open_target)
    return app.exec()


def _show_a_unit(win: MainWindow) -> None:
    """In a rendered session, select the unit with the most events among the shown channels, so
    its quality plots are drawn beside the unit list (nothing when a unit is selected already)."""
    ctl = getattr(win, "units", None)
    if ctl is None or ctl.sorting is None or ctl.selection:
        return
    counts = ctl.sorting.counts()
    shown = [u for u in counts if ctl.sorting.unit(u).group == win.bench.group] or list(counts)
    if shown:
        ctl.set_selection([max(shown, key=counts.get)])


def _render(win: MainWindow, target: str | None, open_target: Callable[[], bool], screenshot: str) -> int:
    """Open, wait for the complete window, save the PNG. A session's recording gets the quick
    fingerprint check only: the picture changes nothing, and hashing the whole file would take
    longer than the rest (its content hash is checked when the session is opened to work on)."""
    from rigside.gui.screenshot import capture
    win.units.files.check_content = False
    # the unit is chosen as soon as the units are in (its waveforms are read while the rest loads)
    win.units.sorting_replaced.connect(lambda: QTimer.singleShot(0, lambda: _show_a_unit(win)))
    win.resize(1600, 1000)
    win.setUpdatesEnabled(False)    # no picture wanted until the window is complete: painted once, at capture
    opened = target is None or open_target()    # a session is read on a worker while the window is laid out
    win.show()
    QApplication.processEvents()    # the window exposed and laid out once (not painted)
    code = 0
    if target is not None:
        if not opened:
            print(f"rigside: {win.last_error[1]}", file=sys.stderr)
            code = 2
        elif not win.wait_idle() or win.analysis_outcome != "done" or win.last_error:
            print(f"rigside: {win.last_error[1] if win.last_error else 'loading did not finish'}",
                  file=sys.stderr)
            code = 1
    if code == 0:
        _show_a_unit(win)
        win.wait_idle()
        win.setUpdatesEnabled(True)
        capture(win, screenshot)
    win.close()
    return code
