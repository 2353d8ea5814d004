"""Menus, actions and keyboard shortcuts of the workbench window."""

from __future__ import annotations

from typing import Callable

from PySide6.QtGui import QAction, QKeySequence

from rigside.core import __version__
from rigside.gui.dialogs.about import show_about
from rigside.gui.dialogs.shortcuts import ShortcutsDialog

ZOOM_STEP = 1.5


def add_action(win, actions: dict[str, QAction], name: str, text: str, slot: Callable, keys=(), tip: str = "",
               menu=None, before: QAction | None = None) -> QAction:
    """Create an action on ``win`` with shortcuts and a tip, list it in ``actions`` under ``name``,
    and put it in ``menu`` (before the action ``before`` if given)."""
    a = QAction(text, win)
    a.setShortcuts([QKeySequence(k) for k in keys])
    if tip:
        a.setStatusTip(tip)
        a.setToolTip(tip)
    a.triggered.connect(lambda *_: slot())
    win.addAction(a)
    if menu is not None:
        menu.insertAction(before, a) if before is not None else menu.addAction(a)
    actions[name] = a
    return a


def build_actions(win) -> dict[str, QAction]:
    """Create the menus on ``win`` and return its actions by name."""
    bench = win.bench
    actions: dict[str, QAction] = {}

    def act(name: str, text: str, slot: Callable, keys=(), tip: str = "", menu=None) -> QAction:
        return add_action(win, actions, name, text, slot, keys, tip, menu)

    bar = win.menuBar()
    file_menu = bar.addMenu("&File")
    act("open", "&Open a recording or session…", win.choose_file, [QKeySequence.StandardKey.Open], menu=file_menu)
    act("open_demo", "Open the &demo recording", win.open_demo, ["Ctrl+Shift+D"], menu=file_menu)
    win.recent_menu = file_menu.addMenu("Open &recent")
    win.rebuild_recent_menu()
    file_menu.addSeparator()
    act("quit", "&Quit", win.close, ["Ctrl+Q"], menu=file_menu)

    view = bar.addMenu("&View")
    act("next_group", "Next channel group", lambda: bench.show_group(bench.group + 1),
        ["]", "PgDown"], menu=view)
    act("previous_group", "Previous channel group", lambda: bench.show_group(bench.group - 1),
        ["[", "PgUp"], menu=view)
    act("next_channel", "Select the next channel", lambda: bench.step_channel(1), ["."], menu=view)
    act("previous_channel", "Select the previous channel", lambda: bench.step_channel(-1), [","], menu=view)
    view.addSeparator()
    act("zoom_in", "Zoom in (time)", lambda: zoom(bench, 1 / ZOOM_STEP), ["=", "+"], menu=view)
    act("zoom_out", "Zoom out (time)", lambda: zoom(bench, ZOOM_STEP), ["-"], menu=view)
    act("later", "Scroll later", lambda: scroll(bench, 0.5), ["Right"], menu=view)
    act("earlier", "Scroll earlier", lambda: scroll(bench, -0.5), ["Left"], menu=view)
    act("taller", "Taller traces", lambda: win.traces.scale_traces(1.4), ["Shift+Up"], menu=view)
    act("shorter", "Shorter traces", lambda: win.traces.scale_traces(1 / 1.4), ["Shift+Down"], menu=view)
    raw = act("raw", "Show raw (unfiltered) signal", lambda: bench.set_show_raw(not bench.show_raw), ["R"],
              menu=view)
    raw.setCheckable(True)
    bench.show_raw_changed.connect(lambda: raw.setChecked(bench.show_raw))
    view.addSeparator()
    win.panels_menu = view.addMenu("&Panels")
    for dock in win.docks.values():
        win.panels_menu.addAction(dock.toggleViewAction())
    act("reset_layout", "Reset the window layout", win.reset_layout, menu=view)

    thr = bar.addMenu("&Threshold")
    act("stricter", "Raise the threshold (stricter)", lambda: bench.step_threshold(1), ["Ctrl+Up"], menu=thr)
    act("looser", "Lower the threshold (looser)", lambda: bench.step_threshold(-1), ["Ctrl+Down"], menu=thr)
    act("scale", "Switch between σ multiples and µV",
        lambda: bench.set_scale("uv" if bench.scale == "sigma" else "sigma"), ["U"], menu=thr)
    act("scope", "Switch between all channels and the selected channel",
        lambda: bench.set_scope("channel" if bench.scope == "all" else "all"), ["Ctrl+U"], menu=thr)
    thr.addSeparator()
    act("detect", "Detect again", win.start_detection, ["F5"], menu=thr)
    act("cancel", "Cancel running work", lambda: win.runner.cancel(), ["Esc"], menu=thr)

    help_menu = bar.addMenu("&Help")
    act("shortcuts", "Keyboard shortcuts", lambda: show_shortcuts(win), ["F1"], menu=help_menu)
    act("about", "About rigside", lambda: show_about(win, _version()), menu=help_menu)
    return actions


def show_shortcuts(win) -> ShortcutsDialog:
    dialog = ShortcutsDialog(list(win.actions_by_name.values()), win)
    dialog.open()
    win.shortcuts_dialog = dialog
    return dialog


def zoom(bench, factor: float) -> None:
    rec = bench.recording
    if rec is None:
        return
    t0, t1 = bench.view
    centre, half = 0.5 * (t0 + t1), 0.5 * (t1 - t0) * factor
    half = min(max(half, 0.0025), rec.duration_s / 2)
    a = max(0.0, min(centre - half, rec.duration_s - 2 * half))
    bench.set_view(a, a + 2 * half)


def scroll(bench, fraction: float) -> None:
    rec = bench.recording
    if rec is None:
        return
    t0, t1 = bench.view
    width = t1 - t0
    a = min(max(0.0, t0 + fraction * width), max(0.0, rec.duration_s - width))
    bench.set_view(a, a + width)


def _version() -> str:
    return __version__
