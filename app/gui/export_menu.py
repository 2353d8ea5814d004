"""File > Export in the window: spike times (export folder), the unit table (metrics CSV) and,
once an audit exists, its HTML report and table. Writing runs on the window's job runner.

``install_export(window)`` adds the submenu; it is one of the window's extensions and runs after
the units and audit installers (it reuses the audit's own save actions).
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import QFileDialog, QMenu

from rigside.core.errors import RigsideError
from rigside.core.exports.units import export_units
from rigside.core.io.atomic import check_output
from rigside.core.quality.unit_table import sorting_unit_table
from rigside.core.quality.unit_table_io import write_unit_table_csv
from rigside.core.signal.pipeline import thresholds_sigma
from rigside.core.units.session import snapshot
from rigside.gui.save_folder import remember_folder, suggested_path
from rigside.gui.window_actions import add_action

EXPORT_SLOT = "export"


def _spike_times_job(session, out_dir: Path, progress=None, cancel=None):
    return export_units(session, out_dir, progress=progress, cancel=cancel)


def _unit_table_job(session, out: Path, metric_params, progress=None, cancel=None):
    events = session.events
    table = sorting_unit_table(events, session.sorting, thresholds_sigma(session.params, events.sigma_uv),
                               metric_params, progress=progress, cancel=cancel)
    return write_unit_table_csv(table, out, metric_params)


class Exporter:
    """The export actions; ``pick_folder(title, start)`` and ``pick_file(title, start, filter)``
    are attributes so tests can answer the dialogs."""

    def __init__(self, window):
        self.window = window
        self.pick_folder = lambda title, start: QFileDialog.getExistingDirectory(window, title, start)
        self.pick_file = lambda title, start, filt: QFileDialog.getSaveFileName(window, title, start, filt)[0]

    def _session(self):
        s = self.window.units.session
        if s is None:
            self.window.show_error("Nothing to export", "exporting needs units, got none (cluster first)")
        return s

    def spike_times(self) -> bool:
        """Ask for a folder and write the spike times and binned matrix of every unit into it."""
        s = self._session()
        if s is None:
            return False
        rec = Path(s.recording.path)
        folder = self.pick_folder("Export spike times into a folder",
                                  str(suggested_path(rec, rec.stem + "_spikes")))
        if not folder:
            return False
        remember_folder(folder)
        self.window.runner.submit(EXPORT_SLOT, "Exporting spike times", _spike_times_job, snapshot(s), Path(folder),
                                  on_done=lambda w: self._done(f"Spike times of {len(w['npy'])} units written to "
                                                               f"{folder}"))
        return True

    def unit_table(self) -> bool:
        """Ask for a CSV file and write every unit's quality numbers into it."""
        s = self._session()
        if s is None:
            return False
        rec = Path(s.recording.path)
        path = self.pick_file("Export the unit table", str(suggested_path(rec, rec.stem + "_units.csv")),
                              "CSV table (*.csv)")
        if not path:
            return False
        try:
            out = check_output(path, s.recording.path, s.source, suffixes=(".csv",))
        except RigsideError as exc:
            self.window.show_error("Cannot write the unit table", str(exc))
            return False
        remember_folder(out.parent)
        self.window.runner.submit(EXPORT_SLOT, "Exporting the unit table", _unit_table_job, snapshot(s), out,
                                  self.window.units.metric_settings(),
                                  on_done=lambda p: self._done(f"Unit table written to {p}"))
        return True

    def _done(self, message: str) -> None:
        self.window.statusBar().showMessage(message, 10000)


def install_export(window) -> Exporter:
    """Add File > Export (spike times, unit table, audit report and table) before Quit."""
    exporter = Exporter(window)
    window.exporter = exporter
    actions = window.actions_by_name
    quit_action = actions["quit"]
    file_menu = next(m for m in window.menuBar().findChildren(QMenu) if quit_action in m.actions())
    menu = QMenu("&Export", window)
    file_menu.insertMenu(quit_action, menu)
    file_menu.insertSeparator(quit_action)
    times = add_action(window, actions, "export_spike_times", "&Spike times (export folder)…", exporter.spike_times,
                       tip="spike_times.csv, one .npy per unit, binned.h5 and export.json in a folder", menu=menu)
    table = add_action(window, actions, "export_unit_table", "&Unit table (metrics CSV)…", exporter.unit_table,
                       tip="One row of quality numbers per unit, with the settings in # lines", menu=menu)
    menu.addSeparator()
    for name in ("audit_report", "audit_table"):
        if name in actions:
            menu.addAction(actions[name])

    def enable() -> None:
        has_units = window.units.session is not None
        for a in (times, table):
            a.setEnabled(has_units)
    window.units.sorting_replaced.connect(enable)
    enable()
    return exporter
