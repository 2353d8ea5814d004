"""Adds the audit of an earlier sorting to the window: the Audit menu and the audit view dock.

``install_audit(window)`` is the only entry point; it sets ``window.audit`` (the
:class:`~app.audit_controller.AuditController`) and ``window.audit_panel``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Callable

from PySide6.QtCore import Qt
from PySide6.QtGui import QAction
from PySide6.QtWidgets import QDialog, QFileDialog, QMenu

from rigside.core.errors import RigsideError
from rigside.gui.audit_controller import SPIKE_FILES, AuditController, ImportChoices
from rigside.gui.dialogs.audit_import import AuditImportDialog
from rigside.gui.panels.audit_pair import TRACE_KEY, trace_rows
from rigside.gui.panels.audit_view import AuditPanel
from rigside.gui.save_folder import remember_folder, suggested_folder, suggested_path
from rigside.gui.window_actions import add_action

AUDIT_HEIGHT = 620


def install_audit(window) -> AuditController:
    """Create the audit controller, its dock (hidden until an audit is started) and the Audit menu."""
    ctl = AuditController(window)
    window.audit = ctl
    panel = AuditPanel(window.bench, window.runner, ctl)
    window.audit_panel = panel
    dock = window.add_panel(panel, Qt.DockWidgetArea.BottomDockWidgetArea, tab_with=window.docks.get("waveforms"))
    dock.hide()

    sized = []

    def show_dock() -> None:
        dock.show()
        dock.raise_()
        if not sized:   # room for the plots the first time; later the user's layout stays
            sized.append(True)
            window.resizeDocks([dock], [AUDIT_HEIGHT], Qt.Orientation.Vertical)

    def choose_and_start() -> None:
        try:
            rec = ctl.recording()
        except RigsideError as exc:
            window.show_error("Cannot start the audit", str(exc))
            return
        path, _ = QFileDialog.getOpenFileName(window, "Import earlier spike times", str(Path(rec.path).parent),
                                              SPIKE_FILES)
        if not path:
            return
        session = ctl.session()
        dialog = AuditImportDialog(Path(path), rec.rate_hz,
                                   ctl.fresh_description(ImportChoices()) if session is not None else None,
                                   ctl.fresh_description(ImportChoices(use_session=False)), window)
        if dialog.exec() == QDialog.DialogCode.Accepted and ctl.start(path, dialog.choices()):
            show_dock()

    def save(kind: str) -> None:
        title, filt, suffix = (("Save the audit report", "HTML report (*.html)", ".html") if kind == "report"
                               else ("Save the audit table", "CSV table (*.csv)", ".csv"))
        base = (suggested_path(ctl.spike_path, ctl.spike_path.stem + "_audit" + suffix) if ctl.spike_path
                else suggested_folder())
        path, _ = QFileDialog.getSaveFileName(window, title, str(base), filt)
        if path:
            remember_folder(Path(path).parent)
            ctl.export(kind, path)

    def sync_trace(*_) -> None:
        """The chosen pair's spike rows on the trace view while the audit view is open."""
        if ctl.pair is not None and dock.toggleViewAction().isChecked():
            window.traces.set_spike_rows(TRACE_KEY, trace_rows(ctl.pair))
        else:
            window.traces.clear_spike_rows(TRACE_KEY)

    ctl.pair_changed.connect(sync_trace)
    dock.toggleViewAction().toggled.connect(sync_trace)
    panel.import_button.clicked.connect(choose_and_start)
    panel.report_button.clicked.connect(lambda: save("report"))
    panel.table_button.clicked.connect(lambda: save("table"))
    ctl.result_changed.connect(lambda: show_dock() if ctl.result is not None else None)
    _build_menu(window, ctl, choose_and_start, save, show_dock)
    return ctl


def _build_menu(win, ctl: AuditController, choose: Callable, save: Callable, show_dock: Callable) -> None:
    bar = win.menuBar()
    menu = QMenu("&Audit", win)
    about = win.actions_by_name.get("about")
    help_menu = next((m for m in bar.findChildren(QMenu) if about is not None and about in m.actions()), None)
    bar.insertMenu(help_menu.menuAction(), menu) if help_menu is not None else bar.addMenu(menu)

    def act(name: str, text: str, slot: Callable, keys=(), tip: str = "") -> QAction:
        return add_action(win, win.actions_by_name, name, text, slot, keys, tip, menu)

    act("audit_import", "&Import earlier spike times and audit them…", choose, ["Ctrl+Shift+I"],
        "Check an earlier sorting (CSV, NumPy, HDF5 or NWB) against a fresh look at the open recording")
    cancel = act("audit_cancel", "&Cancel the audit", ctl.cancel)
    menu.addSeparator()
    report = act("audit_report", "Save the audit &report (HTML)…", lambda: save("report"))
    table = act("audit_table", "Save the audit &table (CSV)…", lambda: save("table"))
    act("audit_show", "&Show the audit view", show_dock)

    def enable() -> None:
        for a in (report, table):
            a.setEnabled(ctl.result is not None)
        cancel.setEnabled(ctl.busy())
    ctl.result_changed.connect(enable)
    win.runner.started.connect(lambda *_: enable())
    win.runner.finished.connect(lambda *_: enable())
    enable()
