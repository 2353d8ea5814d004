"""Adds the training session to the window: File > New practice recording, the trade-off view beside
the count curve, and the Practice menu (hide or reveal ground truth, save the summary).

``install_practice(window)`` is the only entry point; it sets ``window.practice`` (:class:`Practice`).
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import Qt, QTimer
from PySide6.QtWidgets import QDialog, QFileDialog, QMenu

from rigside.core.errors import RigsideError
from rigside.core.synthetic.synth import write_practice
from rigside.gui.dialogs.practice import PracticeDialog
from rigside.gui.panels.tradeoff import TradeoffPanel
from rigside.gui.practice_summary import save_summary
from rigside.gui.save_folder import remember_folder, suggested_folder, suggested_path
from rigside.gui.window_actions import add_action

WRITE_LABEL = "Writing the practice recording"


class Practice:
    """The window's practice actions and the trade-off view."""

    def __init__(self, window):
        self.window = window
        self.dialog: PracticeDialog | None = None
        self.panel = TradeoffPanel(window.bench, window.runner)
        # above the count curve, in a tab beside the threshold table, so that both curves show at once
        self.dock = window.add_panel(self.panel, Qt.DockWidgetArea.RightDockWidgetArea,
                                     tab_with=window.docks["threshold"])
        self.dock.hide()
        self._shown_once = False
        window.bench.truth_changed.connect(self._on_truth)
        self._install_actions()

    def _install_actions(self) -> None:
        w, acts = self.window, self.window.actions_by_name
        file_menu = w.recent_menu.parentWidget()
        add_action(w, acts, "new_practice", "&New practice recording…", self.choose_and_write, ["Ctrl+Shift+P"],
                   "Make a synthetic recording with known units, write it to a folder and open it",
                   menu=file_menu, before=w.recent_menu.menuAction())
        bar = w.menuBar()
        menu = QMenu("&Practice", w)
        about = acts.get("about")
        help_menu = next((m for m in bar.findChildren(QMenu) if about is not None and about in m.actions()), None)
        bar.insertMenu(help_menu.menuAction(), menu) if help_menu is not None else bar.addMenu(menu)
        menu.addAction(acts["new_practice"])
        hide = add_action(w, acts, "hide_truth", "&Hide ground truth", lambda: self.set_hidden(True),
                          ["Ctrl+Shift+H"], "Hide hits, misses and the trade-off so that a newcomer guesses first",
                          menu=menu)
        add_action(w, acts, "reveal_truth", "&Reveal ground truth", lambda: self.set_hidden(False),
                   ["Ctrl+Shift+R"], "Show hits, misses and the trade-off again", menu=menu)
        hide.setCheckable(True)
        w.bench.truth_changed.connect(lambda: hide.setChecked(w.bench.truth_hidden))
        menu.addSeparator()
        add_action(w, acts, "save_summary", "&Save the practice summary…", self.choose_and_save,
                   tip="The count curve and the trade-off as PNG or SVG, the curve as CSV, and the settings",
                   menu=menu)

    # ---- ground truth -------------------------------------------------------------------
    def set_hidden(self, hidden: bool) -> None:
        self.window.bench.set_truth_hidden(hidden)
        self.window.statusBar().showMessage("Ground truth hidden: make your guess first." if hidden
                                            else "Ground truth revealed.", 8000)

    def _on_truth(self) -> None:
        if self.window.bench.analysis.truth is not None and not self._shown_once:
            self._shown_once = True
            self.show_view()

    def show_view(self) -> None:
        self.dock.show()
        self.dock.raise_()

    # ---- new practice recording -----------------------------------------------------------
    def choose_and_write(self) -> None:
        self.dialog = PracticeDialog(suggested_folder(None), self.window)
        if self.dialog.exec() == QDialog.DialogCode.Accepted:
            self.write(self.dialog.path(), self.dialog.settings())

    def write(self, path: Path, settings) -> None:
        """Write the practice recording in the background (progress in the status bar), then open it."""
        remember_folder(path.parent)
        self.window.runner.submit("practice", WRITE_LABEL, write_practice, path, settings,
                                  on_done=lambda _: QTimer.singleShot(0, lambda: self.window.open_path(str(path))))

    # ---- summary ----------------------------------------------------------------------
    def choose_and_save(self) -> None:
        w = self.window
        rec = w.bench.recording
        if rec is None or self.panel.curve is None:
            w.show_error("Cannot save the practice summary", "the summary needs a recording with ground truth, "
                         "scored and revealed (Practice > Reveal ground truth)")
            return
        start = suggested_path(rec.path, f"{Path(rec.path).stem}-summary.png")
        path, _ = QFileDialog.getSaveFileName(w, "Save the practice summary", str(start),
                                              "PNG image (*.png);;SVG drawing (*.svg)")
        if path:
            self.save(Path(path))

    def save(self, path: Path) -> list[Path] | None:
        w = self.window
        w.docks["count_curve"].show()
        self.show_view()
        group = w.bench.recording.group_names[w.bench.group]
        try:
            files = save_summary(path, w.bench.recording.path, group, self.panel.curve,
                                 [w.panels["count_curve"], self.panel])
        except (RigsideError, OSError) as exc:
            w.show_error("Cannot save the practice summary", str(exc))
            return None
        remember_folder(path.parent)
        w.statusBar().showMessage("Saved " + ", ".join(f.name for f in files), 10000)
        return files


def install_practice(window) -> Practice:
    window.practice = Practice(window)
    return window.practice
