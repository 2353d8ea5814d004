"""Adds the unit work to the window: panels in docks, the Units and Edit menus, session items.

``install_units(window)`` is the only entry point; it sets ``window.units`` (the
:class:`~app.sorting_controller.SortingController`, whose ``files`` is the
:class:`~app.session_flow.SessionFlow`) and ``window.unit_panels``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Callable

from PySide6.QtCore import Qt
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import QDialog, QMenu, QStyle

from rigside.core.errors import RigsideError
from rigside.core.units.sorting import LABELS, pool_group
from rigside.gui.dialogs.unit_dialogs import ClusterDialog, LimitsDialog, NoteDialog, PartsDialog, spin_count
from rigside.gui.panels.unit_plane import ClusterPlanePanel
from rigside.gui.panels.unit_plots import UnitPlotsPanel
from rigside.gui.panels.units import UnitListPanel
from rigside.gui.session_flow import SessionFlow
from rigside.gui.settings_store import settings
from rigside.gui.sorting_controller import SortingController
from rigside.gui.suggestions_frame import install_suggestions
from rigside.gui.window_actions import add_action

UNIT_LIST_WIDTH = 600
"""Narrowest the unit list is first shown (pixels); wider when its columns need it."""
UNIT_LIST_SHARE = 0.5
"""Largest share of the window's width the unit list takes when first shown."""
UNIT_PLOTS_HEIGHT = 560
LABEL_KEYS = ("0", "1", "2", "3")
"""Keys of the labels in :data:`rigside.core.units.sorting.LABELS` order, active while the unit list has focus."""
LIST_SCOPE = "in the unit list"


def label_action_name(label: str) -> str:
    """Name of the action setting ``label`` in ``window.actions_by_name`` (e.g. "label_not_neural")."""
    return "label_" + label.replace(" ", "_").replace("-", "_")


def install_units(window) -> SortingController:
    """Create the controller, the unit panels, menus and shortcuts on ``window``."""

    ctl = SortingController(window)
    ctl.files = SessionFlow(ctl, Path(settings().fileName()).parent / "autosave")
    window.session_opener = ctl.files.open
    window.units = ctl
    bench, runner = window.bench, window.runner
    right, bottom = Qt.DockWidgetArea.RightDockWidgetArea, Qt.DockWidgetArea.BottomDockWidgetArea
    unit_list = UnitListPanel(bench, runner, ctl)
    plots = UnitPlotsPanel(bench, runner, ctl)
    plane = ClusterPlanePanel(bench, runner, ctl)
    docks = [window.add_panel(unit_list, right, tab_with=window.docks.get("threshold")),
             window.add_panel(plots, bottom, tab_with=window.docks.get("waveforms")),
             window.add_panel(plane, bottom, tab_with=window.docks.get("features"))]
    window.unit_panels = {"list": unit_list, "plots": plots, "plane": plane}

    sized: set[str] = set()   # room for the units the first time there are some; later the user's layout stays

    def fit_unit_list() -> None:
        """Every column of the unit list in view, within a share of the window's width and leaving the unit plots
        and the cluster plane below it their least widths (docks squeezed below those are drawn over each other)."""
        gap = window.style().pixelMetric(QStyle.PixelMetric.PM_DockWidgetSeparatorExtent)
        below = plots.minimumSizeHint().width() + plane.minimumSizeHint().width() + 3 * gap
        want = min(max(UNIT_LIST_WIDTH, unit_list.wanted_width()), int(UNIT_LIST_SHARE * window.width()),
                   window.width() - below)
        window.resizeDocks([docks[0]], [want], Qt.Orientation.Horizontal)

    def show_unit_docks() -> None:
        if ctl.sorting is None:
            return
        for d in docks:
            d.show()
            d.raise_()
        if "docks" not in sized:
            sized.update(("docks", "numbers") if ctl.metrics else ("docks",))   # stored numbers: fitted to them
            fit_unit_list()
            window.resizeDocks([docks[1]], [UNIT_PLOTS_HEIGHT], Qt.Orientation.Vertical)

    def fit_to_numbers() -> None:
        if "docks" in sized and "numbers" not in sized and ctl.metrics:   # the numbers widen their columns
            sized.add("numbers")
            fit_unit_list()
    ctl.sorting_replaced.connect(show_unit_docks)
    ctl.metrics_changed.connect(fit_to_numbers)

    def colour_selected_events(*_: object) -> None:
        """Selected units' events in one colour each in the workbench's own views too."""
        sets = [(r, ctl.unit_colour(u)) for u, r in ctl.selected_rows().items()]
        for name in ("features", "traces"):
            window.panels[name].highlight(sets)
    for signal in (ctl.selection_changed, ctl.units_changed, ctl.sorting_replaced, ctl.rows_changed):
        signal.connect(colour_selected_events)
    _build_menus(window, ctl, unit_list, plane)
    install_suggestions(window, ctl)
    return ctl


def _build_menus(win, ctl: SortingController, unit_list: UnitListPanel, plane: ClusterPlanePanel) -> None:
    actions = win.actions_by_name

    def act(name: str, text: str, slot: Callable, keys=(), tip: str = "", menu=None, before=None) -> QAction:
        return add_action(win, actions, name, text, slot, keys, tip, menu, before)

    _add_session_items(win, act, ctl.files)
    _add_edit_menu(win, act, ctl)
    _add_units_menu(win, act, ctl, unit_list, plane)


def _menu_holding(win, name: str) -> QMenu | None:
    """The menu of the window's menu bar that holds the action ``name`` (None: no such action or menu)."""
    a = win.actions_by_name.get(name)
    return next((m for m in win.menuBar().findChildren(QMenu) if a is not None and a in m.actions()), None)


def _insert_menu(win, menu: QMenu, before_action: str) -> None:
    """Put ``menu`` in the menu bar before the menu holding ``before_action`` (at the end without one)."""
    after = _menu_holding(win, before_action)
    bar = win.menuBar()
    bar.insertMenu(after.menuAction(), menu) if after is not None else bar.addMenu(menu)


def _add_session_items(win, act: Callable, files: SessionFlow) -> None:
    """Open, save and save-as of a session in the File menu, above Quit."""
    file_menu = _menu_holding(win, "quit")
    if file_menu is None:
        return
    quit_action = win.actions_by_name.get("quit")
    act("open_session", "Open a &session…", files.choose_and_open, ["Ctrl+Shift+O"], menu=file_menu,
        before=quit_action)
    act("save_session", "&Save the session", files.save, [QKeySequence.StandardKey.Save], menu=file_menu,
        before=quit_action)
    act("save_session_as", "Save the session &as…", files.save_as, ["Ctrl+Shift+S"], menu=file_menu,
        before=quit_action)
    file_menu.insertSeparator(quit_action)


def _add_edit_menu(win, act: Callable, ctl: SortingController) -> None:
    """Undo and redo, enabled and named after the curation step they would undo or redo."""
    edit = QMenu("&Edit", win)
    _insert_menu(win, edit, "zoom_in")
    undo = act("undo", "Undo", ctl.undo, [QKeySequence.StandardKey.Undo], menu=edit)
    redo = act("redo", "Redo", ctl.redo, [QKeySequence.StandardKey.Redo], menu=edit)
    stack = ctl.undo_stack
    for a, can, text_changed, word in ((undo, stack.canUndoChanged, stack.undoTextChanged, "Undo"),
                                       (redo, stack.canRedoChanged, stack.redoTextChanged, "Redo")):
        a.setEnabled(False)
        can.connect(a.setEnabled)
        text_changed.connect(lambda t, a=a, w=word: a.setText(f"{w}: {t}" if t else w))


def _add_units_menu(win, act: Callable, ctl: SortingController, unit_list: UnitListPanel,
                    plane: ClusterPlanePanel) -> None:
    """The Units menu; its commands on one unit or a few also sit in the unit list's context menu."""
    units = QMenu("&Units", win)
    _insert_menu(win, units, "about")
    act("cluster", "&Cluster the detection…", lambda: _cluster(win, ctl), ["Ctrl+K"], menu=units,
        tip="First pass: a Gaussian mixture per channel group on the events at the current threshold")
    units.addSeparator()
    context = [
        act("split_outline", "Split the selected unit by an &outline", lambda: plane.start_outline("split"),
            ["Ctrl+D"], menu=units, tip="Draw in the cluster plane around the events that leave the unit"),
        act("choose_outline", "Choose &events by an outline", lambda: plane.start_outline("choose"),
            ["Ctrl+E"], menu=units),
        act("merge", "&Merge the selected units",
            lambda: (sel := _selected(win, ctl, 2, "merge")) and ctl.merge(sel), ["Ctrl+M"], menu=units),
        act("recluster", "&Recluster the selected unit…", lambda: _recluster(win, ctl), ["Ctrl+Shift+K"],
            menu=units),
        act("note", "&Note on the selected unit…", lambda: _write_note(win, ctl), ["Ctrl+Shift+N"], menu=units),
    ]
    context += _label_actions(win, act, units.addMenu("&Label"),
                              lambda label: (sel := _selected(win, ctl, 1, "label")) and ctl.relabel(sel, label))
    units.addSeparator()
    act("next_unit", "Select the next unit in the list", lambda: _step_unit(unit_list, 1), ["Alt+Down"],
        menu=units)
    act("previous_unit", "Select the previous unit in the list", lambda: _step_unit(unit_list, -1), ["Alt+Up"],
        menu=units)
    act("limits", "Quality &limits…", lambda: _edit_limits(win, ctl, unit_list), menu=units)
    for a in context:
        unit_list.table.addAction(a)


def _selected(win, ctl: SortingController, n: int, what: str) -> list[int] | None:
    """The selected units (unassigned pools left out) when there are at least ``n``; otherwise say so
    and return None."""
    sel = [u for u in ctl.selection if pool_group(u) is None]
    if len(sel) < n:
        pools = " (an unassigned row is no unit: outline its events and move them into one)" \
            if len(sel) < len(ctl.selection) else ""
        win.show_error(f"Cannot {what}",
                       f"{what} needs {n} selected unit{'s' if n > 1 else ''}, got {len(sel)}{pools}")
        return None
    return sel


def _cluster(win, ctl: SortingController) -> None:
    """First pass on the detection: ask for the count and scope when a person is at the window."""
    can_limit = False
    try:
        can_limit = ctl.holds_detection(ctl.current_detection())
    except RigsideError:  # ctl.cluster below shows the message
        pass
    if win.interactive:
        dialog = ClusterDialog(ctl.group_name(int(win.bench.group)), can_limit, win)
        if dialog.exec() != QDialog.DialogCode.Accepted:
            return
        groups = [int(win.bench.group)] if dialog.only_group.isChecked() else None
        ctl.cluster(spin_count(dialog.k), groups)
    else:
        ctl.cluster()


def _recluster(win, ctl: SortingController) -> None:
    sel = _selected(win, ctl, 1, "recluster a unit")
    if sel:
        dialog = PartsDialog(sel[0], win)
        if dialog.exec() == QDialog.DialogCode.Accepted:
            ctl.recluster(sel[0], spin_count(dialog.k))


def _write_note(win, ctl: SortingController) -> None:
    sel = _selected(win, ctl, 1, "write a note")
    if sel:
        dialog = NoteDialog(sel[0], ctl.sorting.unit(sel[0]).note, win)
        if dialog.exec() == QDialog.DialogCode.Accepted:
            ctl.set_note(sel[0], dialog.text.toPlainText())


def _edit_limits(win, ctl: SortingController, unit_list: UnitListPanel) -> None:
    dialog = LimitsDialog(ctl.limits, win)
    if dialog.exec() == QDialog.DialogCode.Accepted:
        ctl.limits = dialog.values()
        unit_list.set_limits_text()
        ctl.metrics_changed.emit()


def _step_unit(unit_list: UnitListPanel, step: int) -> None:
    """Select the unit ``step`` rows below (negative: above) the current one, wrapping around."""
    view = unit_list.table
    n = unit_list.proxy.rowCount()
    if n == 0:
        return
    current = view.currentIndex().row() if view.currentIndex().isValid() else -1
    unit_list.select_rows([(current + step) % n])
    view.setCurrentIndex(unit_list.proxy.index((current + step) % n, 0))


def _label_actions(win, act: Callable, menu: QMenu, relabel: Callable[[str], object]) -> list[QAction]:
    """One action per label in ``menu``, on its number key while the unit list has focus."""
    out = []
    for label, key in zip(LABELS, LABEL_KEYS):
        a = act(label_action_name(label), f"Label as {label}", lambda label=label: relabel(label), [key], menu=menu,
                tip=f"Label the selected units as {label} (key {key} {LIST_SCOPE})")
        win.removeAction(a)     # a bare number key labels only where the unit list adds it back
        a.setShortcutContext(Qt.ShortcutContext.WidgetShortcut)
        a.setProperty("shortcut_scope", LIST_SCOPE)
        out.append(a)
    return out
