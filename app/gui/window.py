"""The workbench window: a frame that assembles panels in docks around the traces."""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Callable, Sequence

import numpy as np
from PySide6.QtCore import QByteArray, QEventLoop, Qt, QTimer
from PySide6.QtWidgets import (
    QApplication,
    QDockWidget,
    QFileDialog,
    QLabel,
    QMainWindow,
    QMessageBox,
    QPushButton,
    QStackedWidget,
    QVBoxLayout,
    QWidget,
)

from rigside.core.errors import RigsideError
from rigside.core.params import Params
from rigside.core.signal.features import Features
from rigside.core.signal.filtering import design_bandpass
from rigside.core.signal.overview import load_overview
from rigside.core.units.session_open import file_kind, stored_noise
from rigside.gui import jobs, overview_flow, palette
from rigside.gui.audit_frame import install_audit
from rigside.gui.depth_frame import install_depth
from rigside.gui.export_menu import install_export
from rigside.gui.model import Workbench
from rigside.gui.opening import open_with_dialogs
from rigside.gui.panels.base import Panel
from rigside.gui.panels.count_curve import CountCurvePanel
from rigside.gui.panels.features import FeaturePanel
from rigside.gui.panels.rate_strip import RateStripPanel
from rigside.gui.panels.threshold import ThresholdPanel
from rigside.gui.panels.traces import TracePanel
from rigside.gui.panels.waveforms import WaveformPanel
from rigside.gui.practice_frame import install_practice
from rigside.gui.settings_store import settings
from rigside.gui.task_status import TaskStatus
from rigside.gui.units_frame import install_units
from rigside.gui.window_actions import build_actions
from rigside.gui.workers import Runner
from rigside.sample_data import demo_path

LAYOUT_VERSION, MAX_RECENT = 1, 8
MIN_TRACE_SHARE = 0.4
"""A restored layout must leave the traces at least this share of the window's height."""
ANALYSIS_LABEL = "Detecting events"
log = logging.getLogger("rigside")
OPEN_FILTER = "Recordings and sessions (*.bin *.dat *.raw *.h5 *.hdf5);;All files (*)"

EXTENSIONS: tuple[Callable, ...] = (install_units, install_audit, install_export, install_practice, install_depth)
"""Installers run on every new window: each adds its panels, menus and actions."""


class MainWindow(QMainWindow):
    """Traces in the middle, panels in docks; ``add_panel`` is how new panels join."""

    def __init__(self, interactive: bool = True, extensions: Sequence[Callable] | None = None):
        """``interactive=False`` (screenshots): no dialogs, and the saved layout and recent
        files are neither used nor changed, so renders are reproducible.

        ``extensions`` (default :data:`EXTENSIONS`) are called with the window after its own
        panels and menus exist and before the saved layout is restored; each adds its panels
        (``add_panel``), menus and actions, so their docks take part in the layout."""
        super().__init__()
        palette.setup_pyqtgraph()
        self.setObjectName("rigside_workbench")
        self.setWindowTitle("rigside")
        self.interactive = interactive
        self.bench = Workbench()
        self.runner = Runner(self)
        self.panels: dict[str, Panel] = {}
        self.docks: dict[str, QDockWidget] = {}
        self.last_error: tuple[str, str] | None = None
        self.messages: list[QMessageBox] = []
        self.analysis_outcome = "none"
        self._overview_builder = None   # the overview the running detection pass builds, if any
        self.session_opener: Callable[..., bool] | None = None   # (path, recording=None), by install_units
        self.setAcceptDrops(True)

        self.traces = TracePanel(self.bench, self.runner)
        self.panels["traces"] = self.traces
        self.central = QStackedWidget()
        self.central.addWidget(self._start_page())
        self.central.addWidget(self.traces)
        self.setCentralWidget(self.central)
        self.setCorner(Qt.Corner.BottomRightCorner, Qt.DockWidgetArea.RightDockWidgetArea)
        self.setCorner(Qt.Corner.TopRightCorner, Qt.DockWidgetArea.RightDockWidgetArea)
        self.setDockNestingEnabled(True)
        threshold = self.add_panel(ThresholdPanel(self.bench, self.runner), Qt.DockWidgetArea.RightDockWidgetArea)
        curve = self.add_panel(CountCurvePanel(self.bench, self.runner), Qt.DockWidgetArea.RightDockWidgetArea)
        self.splitDockWidget(threshold, curve, Qt.Orientation.Vertical)
        strip = self.add_panel(RateStripPanel(self.bench, self.runner), Qt.DockWidgetArea.BottomDockWidgetArea)
        wave = self.add_panel(WaveformPanel(self.bench, self.runner), Qt.DockWidgetArea.BottomDockWidgetArea)
        feat = self.add_panel(FeaturePanel(self.bench, self.runner), Qt.DockWidgetArea.BottomDockWidgetArea)
        self.splitDockWidget(strip, wave, Qt.Orientation.Vertical)
        self.splitDockWidget(wave, feat, Qt.Orientation.Horizontal)
        self.resize(1600, 1000)
        self._size_docks()

        self.task_status = TaskStatus(self.runner)
        self.statusBar().addPermanentWidget(self.task_status)
        self.runner.finished.connect(self._on_finished)
        self.runner.error.connect(lambda label, msg: self.show_error(f"{label} failed", msg))
        self.actions_by_name = build_actions(self)
        self.extensions = [install(self) for install in (EXTENSIONS if extensions is None else extensions)]
        for pid in ("threshold", "waveforms", "features"):  # the workbench's own tabs show first
            self.docks[pid].raise_()
        self._default_state = self.saveState(LAYOUT_VERSION)
        self._check_layout = False
        if interactive:
            self._restore_layout()

    # ---- frame --------------------------------------------------------------------------
    def add_panel(self, panel: Panel, area: Qt.DockWidgetArea, tab_with: QDockWidget | None = None) -> QDockWidget:
        """Place a panel in a dock (tabbed with ``tab_with`` if given) and list it in View > Panels."""
        dock = QDockWidget(panel.title, self)
        dock.setObjectName(f"dock_{panel.panel_id}")
        dock.setWidget(panel)
        dock.setFeatures(QDockWidget.DockWidgetFeature.DockWidgetMovable
                         | QDockWidget.DockWidgetFeature.DockWidgetClosable
                         | QDockWidget.DockWidgetFeature.DockWidgetFloatable)
        self.addDockWidget(area, dock)
        if tab_with is not None:
            self.tabifyDockWidget(tab_with, dock)
        self.panels[panel.panel_id] = panel
        self.docks[panel.panel_id] = dock
        if hasattr(self, "panels_menu"):
            self.panels_menu.addAction(dock.toggleViewAction())
        return dock

    def _start_page(self) -> QWidget:
        page = QWidget()
        title = QLabel("<h2>rigside: threshold workbench</h2>"
                       "<p>Open a recording to see its filtered traces, drag the detection threshold and "
                       "watch counts, rates and markers follow.</p>"
                       "<p>The demo is a synthetic 16-channel recording with known units: it shows hits, "
                       "misses and false alarms as the threshold moves (File > New practice recording makes "
                       "others).</p>")
        title.setWordWrap(True)
        title.setAlignment(Qt.AlignmentFlag.AlignCenter)
        open_button = QPushButton("Open a recording or session…")
        open_button.clicked.connect(self.choose_file)
        demo_button = QPushButton("Open the demo recording")
        demo_button.clicked.connect(self.open_demo)
        lay = QVBoxLayout(page)
        lay.addStretch(1)
        lay.addWidget(title)
        for b in (open_button, demo_button):
            b.setMinimumHeight(36)
            lay.addWidget(b, 0, Qt.AlignmentFlag.AlignHCenter)
        lay.addStretch(2)
        return page

    def _restore_layout(self) -> None:
        s = settings()
        geometry = s.value("window/geometry")
        state = s.value("window/state")
        if isinstance(geometry, QByteArray):
            self.restoreGeometry(geometry)
        if isinstance(state, QByteArray) and self.restoreState(state, LAYOUT_VERSION):
            self._check_layout = True

    def showEvent(self, event) -> None:
        super().showEvent(event)
        if self._check_layout:   # sizes are known once the window is laid out on screen
            self._check_layout = False
            QTimer.singleShot(0, self, self._keep_traces_usable)

    def _keep_traces_usable(self) -> None:
        """Fall back to the default layout when the restored one leaves the traces too little room."""
        if not self.central.isVisible() or self.central.height() < MIN_TRACE_SHARE * self.height():
            self.reset_layout()
            self.statusBar().showMessage("The saved layout left the traces too little room; the default "
                                         "layout is shown (View > Reset the window layout).", 15000)

    def save_layout(self) -> None:
        s = settings()
        s.setValue("window/geometry", self.saveGeometry())
        s.setValue("window/state", self.saveState(LAYOUT_VERSION))
        s.sync()

    def _size_docks(self) -> None:
        """Default dock sizes as shares of the window, leaving the traces over half its height."""
        w, h = self.width(), self.height()
        d = self.docks
        self.resizeDocks([d["threshold"], d["count_curve"]], [int(0.48 * h), int(0.42 * h)], Qt.Orientation.Vertical)
        self.resizeDocks([d["threshold"]], [int(0.35 * w)], Qt.Orientation.Horizontal)
        self.resizeDocks([d["rate_strip"], d["waveforms"]], [int(0.13 * h), int(0.25 * h)], Qt.Orientation.Vertical)

    def reset_layout(self) -> None:
        self.restoreState(self._default_state, LAYOUT_VERSION)
        for dock in self.docks.values():
            dock.setVisible(True)
        self._size_docks()

    def closeEvent(self, event) -> None:
        self.runner.shutdown()
        if self.interactive:
            self.save_layout()
        for box in list(self.messages):  # closing a box removes it from the list
            box.close()
        rec = self.bench.recording
        if rec is not None:
            rec.close()
        super().closeEvent(event)

    def show_error(self, title: str, message: str) -> QMessageBox:
        """A readable, non-blocking message box (never a traceback)."""
        self.last_error = (title, message)
        self.statusBar().showMessage(f"{title}: {message}", 15000)
        box = QMessageBox(QMessageBox.Icon.Warning, title, message, QMessageBox.StandardButton.Ok, self)
        box.setTextFormat(Qt.TextFormat.PlainText)     # messages quote file names and notes verbatim
        box.setWindowModality(Qt.WindowModality.WindowModal)
        box.finished.connect(lambda *_: self.messages.remove(box) if box in self.messages else None)
        self.messages.append(box)
        if self.interactive:
            box.open()
        return box

    # ---- recent files ---------------------------------------------------------------------
    def recent_files(self) -> list[str]:
        value = settings().value("recent_files", [])
        if isinstance(value, str):
            value = [value]
        return [str(v) for v in (value or [])]

    def remember(self, path: str) -> None:
        """Put a recording or session file first in the recent files."""
        if not self.interactive:
            return
        files = [path] + [f for f in self.recent_files() if f != path]
        s = settings()
        s.setValue("recent_files", files[:MAX_RECENT])
        s.sync()
        self.rebuild_recent_menu()

    def rebuild_recent_menu(self) -> None:
        menu = self.recent_menu
        menu.clear()
        files = self.recent_files()
        for f in files:
            menu.addAction(f, lambda f=f: self.open_path(f))
        menu.setEnabled(bool(files))

    # ---- opening ----------------------------------------------------------------------------
    def choose_file(self) -> None:
        start = self.recent_files()[0] if self.recent_files() else str(Path.home())
        path, _ = QFileDialog.getOpenFileName(self, "Open a recording or a session", str(Path(start).parent),
                                              OPEN_FILTER)
        if path:
            self.open_path(path)

    def dragEnterEvent(self, event) -> None:
        if dropped_file(event.mimeData()) is not None:
            event.acceptProposedAction()

    def dropEvent(self, event) -> None:
        path = dropped_file(event.mimeData())
        if path is not None:
            event.acceptProposedAction()
            self.open_path(path)

    def open_demo(self) -> bool:
        return self.open_path(str(demo_path()))

    def open_path(self, path: str, options: dict | None = None, session=None) -> bool:
        """Open a recording or a session file (recognised by its layout) and start what is left to
        compute; False (with a message) if it cannot be opened. With ``session`` (a loaded
        :class:`~rigside.core.units.session.Session` whose recording is ``path``), its stored events,
        noise and features are shown instead of detecting again."""
        try:
            if session is None and file_kind(path) == "session":
                return self.open_session(path)
            rec = self._open(path, options or {})
            if rec is None:
                return False
            params = session.params if session is not None else Params()
            sos = design_bandpass(params.filter, rec.rate_hz)
            overview = load_overview(rec, params.filter)
        except (RigsideError, OSError) as exc:
            self.show_error("Cannot open the recording", str(exc))
            return False
        self.runner.shutdown()
        old = self.bench.recording
        if old is not None:
            old.close()
        try:
            self.bench.set_recording(rec, params, sos, overview)
        except RigsideError as exc:  # e.g. samples that cannot be read where the view starts
            self.setWindowTitle(f"rigside — {Path(path).name} — cannot be shown")
            self.traces.clear_traces()
            self._show_failed(f"This recording cannot be shown: {exc}")
            self.show_error("Cannot show the recording", str(exc))
            return False
        self.central.setCurrentWidget(self.traces)
        self.setWindowTitle(f"rigside — {Path(path).name}")
        if session is None:
            self.remember(str(Path(path).resolve()))
            self.start_detection()
        else:
            self.show_stored(session)
        return True

    def open_session(self, path: str, recording: str | None = None) -> bool:
        """Open a session file (with ``recording``: at that recording, for one that moved)."""
        if self.session_opener is None:
            self.show_error("Cannot open the session", "sessions need the unit work, got a window without it")
            return False
        return self.session_opener(path, recording=recording)

    def show_stored(self, session) -> None:
        """A session's events, noise and features in the workbench: nothing is detected again."""
        b = self.bench
        events = session.events
        b.set_events(stored_noise(events), events)
        data = session.sorting.data
        b.set_features(Features(data.features, list(data.feature_names)))
        self.analysis_outcome = "done"

    def _open(self, path: str, options: dict):
        return open_with_dialogs(self, path, options)

    def start_detection(self) -> None:
        """Noise and detection down to the look-up floor (or the lowest threshold, if lower)."""
        b = self.bench
        rec, params = b.recording, b.analysis.params
        if rec is None:
            return
        finite = b.thresholds_sigma[np.isfinite(b.thresholds_sigma)]
        lowest = float(finite.min()) if len(finite) else params.detect.threshold_sigma
        params.detect.floor_sigma = min(jobs.LOOKUP_FLOOR_SIGMA, lowest)
        self.analysis_outcome = "running"
        self._overview_builder = overview_flow.builder_for(b)
        self.runner.submit("analysis", ANALYSIS_LABEL, jobs.analyse, rec, params, rec.truth_path(),
                           self._overview_builder, on_done=self._on_analysis)

    def _on_finished(self, label: str, outcome: str) -> None:
        if (label == ANALYSIS_LABEL and outcome != "done" and self.analysis_outcome == "running"
                and not self.runner.busy("analysis")):
            self.analysis_outcome = outcome
            if outcome == "cancelled":
                self.statusBar().showMessage("Detection cancelled. Press F5 to detect again.", 15000)
                self.panels["threshold"].show_state("Detection cancelled. Press F5 to detect again.")
            else:
                mine = self.last_error is not None and self.last_error[0] == f"{ANALYSIS_LABEL} failed"
                reason = self.last_error[1] if mine else "see the message"
                self.panels["threshold"].show_state(f"Detection failed: {reason}")

    def _show_failed(self, text: str) -> None:
        """No detection for the current recording: say so where the counts would be."""
        self.analysis_outcome = "failed"
        self.panels["threshold"].show_state(text)

    def _on_analysis(self, result) -> None:
        noise, events, truth = result
        b = self.bench
        b.set_events(noise, events)
        ignored = isinstance(truth, RigsideError)
        if truth is not None and not ignored:
            b.set_truth(truth)
        self.analysis_outcome = "done"
        n_bad = len(noise.bad)
        self.statusBar().showMessage(f"{len(events):,} events stored down to {events.floor_sigma:.2f} σ"
                                     + (f"; {n_bad} channel(s) flagged bad" if n_bad else "")
                                     + (f"; ground truth ignored: {truth}" if ignored else ""), 15000)
        if ignored:
            log.warning("ground truth ignored: %s", str(truth))
        overview_flow.after_detection(self, self._overview_builder)
        self.runner.submit("features", "Computing features", jobs.features, b.recording, events,
                           b.analysis.params, on_done=b.set_features)

    # ---- waiting (screenshots, tests) --------------------------------------------------------
    def wait_idle(self, timeout_s: float = 600.0) -> bool:
        """Run the event loop until no job is left (True) or the timeout passes (False)."""
        if self.runner.busy():
            loop = QEventLoop()
            timer = QTimer(singleShot=True, interval=int(timeout_s * 1000))
            timer.timeout.connect(loop.quit)
            self.runner.idle.connect(loop.quit)
            timer.start()
            loop.exec()
            timer.stop()
            self.runner.idle.disconnect(loop.quit)
        QApplication.processEvents()
        return not self.runner.busy()


def dropped_file(mime) -> str | None:
    """The first local file among dropped URLs, or None."""
    if not mime.hasUrls():
        return None
    return next((u.toLocalFile() for u in mime.urls() if u.isLocalFile() and Path(u.toLocalFile()).is_file()), None)
