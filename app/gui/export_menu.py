"""File > Export in the window: spike times (export folder), the units as an NWB file (new, or a copy
of an NWB recording), the unit table (metrics CSV), once an audit exists its HTML report and table,
and any plot on screen as a picture (PNG or SVG) or, for the count curve and the quality histograms,
its numbers (CSV; see :mod:`rigside.gui.plot_export`). Writing runs on the window's job runner.

``install_export(window)`` adds the submenu; it is one of the window's extensions and runs after
the units and audit installers (it reuses the audit's own save actions).
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QObject
from PySide6.QtWidgets import QApplication, QFileDialog, QMenu

from rigside.core.errors import RigsideError
from rigside.core.exports.nwb import export_nwb, is_nwb_file
from rigside.core.exports.units import export_units
from rigside.core.io.atomic import check_output
from rigside.core.quality.unit_table import sorting_unit_table
from rigside.core.quality.unit_table_io import write_unit_table_csv
from rigside.core.signal.pipeline import thresholds_sigma
from rigside.core.units.session import snapshot
from rigside.gui.plot_export import (
    IMAGE_FILTER,
    PlotTarget,
    focused_view,
    image_bytes,
    plot_targets,
    write_bytes_job,
    write_table_job,
)
from rigside.gui.save_folder import remember_folder, suggested_path
from rigside.gui.window_actions import add_action

EXPORT_SLOT, NWB_SLOT, PLOT_SLOT = "export", "export_nwb", "export_plot"


def _spike_times_job(session, out_dir: Path, progress=None, cancel=None):
    return export_units(session, out_dir, progress=progress, cancel=cancel)


def _unit_table_job(session, out: Path, metric_params, progress=None, cancel=None):
    events = session.events
    table = sorting_unit_table(events, session.sorting, thresholds_sigma(session.params, events.sigma_uv),
                               metric_params, progress=progress, cancel=cancel)
    return write_unit_table_csv(table, out, metric_params)


def _nwb_job(session, recording, out: Path, into_copy, metric_params, progress=None, cancel=None):
    return export_nwb(session, recording, out, into_copy=into_copy, metric_params=metric_params,
                      progress=progress, cancel=cancel)


def _file_name(text: str) -> str:
    return "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in text).strip("_")[:60] or "plot"


class _FocusTracker(QObject):
    """Remembers the plot view of the window that last took the keyboard focus (a click gives it);
    a child of the window, so the connection ends with it."""

    def __init__(self, window):
        super().__init__(window)
        self.last = None
        QApplication.instance().focusChanged.connect(self._changed)

    def _changed(self, _old, new) -> None:
        view = focused_view(new)
        if view is not None and view.window() is self.parent():
            self.last = view


class Exporter:
    """The export actions; ``pick_folder(title, start)`` and ``pick_file(title, start, filter)``
    are attributes so tests can answer the dialogs."""

    def __init__(self, window):
        self.window = window
        self.pick_folder = lambda title, start: QFileDialog.getExistingDirectory(window, title, start)
        self.pick_file = lambda title, start, filt: QFileDialog.getSaveFileName(window, title, start, filt)[0]
        self.focus = _FocusTracker(window)

    @property
    def last_view(self):
        """The plot clicked last (it comes first in the plot menus)."""
        return self.focus.last

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
        out = self._ask_output("Export the unit table", suggested_path(rec, rec.stem + "_units.csv"),
                               "CSV table (*.csv)", (".csv",), (s.recording.path, s.source),
                               "Cannot write the unit table")
        if out is None:
            return False
        self.window.runner.submit(EXPORT_SLOT, "Exporting the unit table", _unit_table_job, snapshot(s), out,
                                  self.window.units.metric_settings(),
                                  on_done=lambda p: self._done(f"Unit table written to {p}"))
        return True

    def nwb(self, into_copy: bool = False) -> bool:
        """Ask for an .nwb file and write the units into it (``into_copy``: a copy of the NWB recording)."""
        s = self._session()
        if s is None:
            return False
        rec = self.window.bench.recording
        title = "Cannot write the NWB file"
        if rec is None or Path(rec.path).resolve() != Path(s.recording.path).resolve():
            self.window.show_error(title, "the NWB file's mean waveforms need the session's recording open, got "
                                          f"{'none' if rec is None else Path(rec.path).name}")
            return False
        if into_copy and not is_nwb_file(rec.path):
            self.window.show_error(title, f"adding the units to a copy needs a recording in NWB, got {rec.path.name}")
            return False
        source = Path(s.recording.path)
        out = self._ask_output("Export the units as NWB", suggested_path(source, source.stem + "_units.nwb"),
                               "NWB file (*.nwb)", (".nwb",), (s.recording.path, s.source), title)
        if out is None:
            return False
        self.window.runner.submit(NWB_SLOT, "Writing the NWB file", _nwb_job, snapshot(s), rec, out,
                                  rec.path if into_copy else None, self.window.units.metric_settings(),
                                  on_done=lambda p: self._done(f"NWB file written to {p}"))
        return True

    def _ask_output(self, title: str, start: Path, filt: str, suffixes: tuple[str, ...], protected,
                    error_title: str) -> Path | None:
        """Ask for an output file; None if none was chosen or it would replace one of ``protected``
        (the inputs) or lacks one of ``suffixes`` (said in an error box)."""
        path = self.pick_file(title, str(start), filt)
        if not path:
            return None
        try:
            out = check_output(path, *protected, suffixes=suffixes)
        except RigsideError as exc:
            self.window.show_error(error_title, str(exc))
            return None
        remember_folder(out.parent)
        return out

    def _plot_path(self, target: PlotTarget, suffix: str, filt: str) -> Path | None:
        rec = self.window.bench.recording
        near = Path(rec.path) if rec is not None else Path.home() / "plot"
        suffixes = (".png", ".svg") if suffix == ".png" else (".csv",)
        protected = (rec.path if rec is not None else None, getattr(self.window.units.session, "source", None))
        return self._ask_output(f"Save {target.name}", suggested_path(near, _file_name(target.name) + suffix), filt,
                                suffixes, protected, "Cannot save the plot")

    def save_plot(self, target: PlotTarget) -> bool:
        """Ask for a .png or .svg file and write the picture of ``target`` into it."""
        out = self._plot_path(target, ".png", IMAGE_FILTER)
        if out is None:
            return False
        self.window.runner.submit(PLOT_SLOT, "Saving the plot", write_bytes_job, out, image_bytes(target, out),
                                  on_done=lambda p: self._done(f"Plot saved as {p}"))
        return True

    def save_plot_data(self, target: PlotTarget) -> bool:
        """Ask for a .csv file and write the numbers ``target`` draws into it."""
        table = target.table()
        if table is None:
            self.window.show_error("Nothing to save", f"{target.name} must show numbers to save, got none")
            return False
        out = self._plot_path(target, ".csv", "CSV table (*.csv)")
        if out is None:
            return False
        self.window.runner.submit(PLOT_SLOT, "Saving the plot's numbers", write_table_job, out, table,
                                  on_done=lambda p: self._done(f"Plot numbers saved as {p}"))
        return True

    def fill_plot_menu(self, menu: QMenu, numbers: bool) -> None:
        """List the plots on screen in ``menu`` (with ``numbers``: those whose numbers can be saved)."""
        menu.clear()
        for target in plot_targets(self.window, self.last_view):
            if numbers and target.table() is None:
                continue
            text = target.name + ("  (last clicked)" if target.view is self.last_view else "")
            act = menu.addAction(text.replace("&", "&&"))
            act.triggered.connect(lambda _=False, t=target: (self.save_plot_data if numbers else self.save_plot)(t))
        if menu.isEmpty():
            menu.addAction("no plot on screen" if not numbers else "no count curve or histogram on screen").\
                setEnabled(False)

    def _done(self, message: str) -> None:
        self.window.statusBar().showMessage(message, 10000)


def install_export(window) -> Exporter:
    """Add File > Export (spike times, NWB, unit table, audit report and table, plots) before Quit."""
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
    nwb = add_action(window, actions, "export_nwb", "&NWB file of the units…", exporter.nwb,
                     tip="Units table (spike times, electrodes, label, quality columns, mean waveforms) and "
                         "provenance in a new NWB file", menu=menu)
    nwb_copy = add_action(window, actions, "export_nwb_copy", "NWB: units added to a &copy of the recording…",
                          lambda: exporter.nwb(into_copy=True),
                          tip="A copy of the NWB recording with the units table added", menu=menu)
    table = add_action(window, actions, "export_unit_table", "&Unit table (metrics CSV)…", exporter.unit_table,
                       tip="One row of quality numbers per unit, with the settings in # lines", menu=menu)
    menu.addSeparator()
    for name in ("audit_report", "audit_table"):
        if name in actions:
            menu.addAction(actions[name])
    menu.addSeparator()
    window.plot_image_menu = menu.addMenu("&Plot as PNG or SVG")
    window.plot_image_menu.aboutToShow.connect(lambda: exporter.fill_plot_menu(window.plot_image_menu, False))
    window.plot_data_menu = menu.addMenu("Plot &numbers as CSV (count curve, histograms)")
    window.plot_data_menu.aboutToShow.connect(lambda: exporter.fill_plot_menu(window.plot_data_menu, True))

    def enable() -> None:
        has_units = window.units.session is not None
        for a in (times, table, nwb):
            a.setEnabled(has_units)
        rec = window.bench.recording
        nwb_copy.setEnabled(has_units and rec is not None and is_nwb_file(rec.path))
    window.bench.recording_changed.connect(enable)
    window.units.sorting_replaced.connect(enable)
    enable()
    return exporter
