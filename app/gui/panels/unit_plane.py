"""Events of one channel group on any two axes, units in their selection colours, and outline tools.

An outline drawn here splits the selected unit (the events inside become a new unit) or
chooses events, which can then be moved to another unit, a new unit or no unit. The axes
are any two of: event time, event peak and every feature, so amplitude over time is one
of the planes.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QComboBox, QHBoxLayout, QLabel, QMenu, QPushButton, QToolButton, QVBoxLayout

from rigside.core.units.polygon import points_in_polygon
from rigside.core.units.sorting import AXIS_AMPLITUDE, AXIS_TIME, FEATURE_AXIS_PREFIX, NO_UNIT, pool_group, pool_id
from rigside.gui import palette
from rigside.gui.curation import PolygonTool
from rigside.gui.panels.base import Panel
from rigside.gui.panels.scatter import OneStyleScatter

BACKGROUND_LIMIT = 20_000
UNIT_LIMIT = 40_000
AXIS_TEXT = {AXIS_TIME: "time (s)", AXIS_AMPLITUDE: "peak on the detection channel (µV)",
             "peak_uv": "aligned peak (µV)", "width_ms": "trough-to-peak width (ms)", "energy_uv2": "energy (µV²)"}


def axis_text(axis: str) -> str:
    if axis in AXIS_TEXT:
        return AXIS_TEXT[axis]
    name = axis[len(FEATURE_AXIS_PREFIX):] if axis.startswith(FEATURE_AXIS_PREFIX) else axis
    return AXIS_TEXT.get(name, f"{name} (score)")


def _thin(idx: np.ndarray, limit: int) -> np.ndarray:
    return idx if len(idx) <= limit else idx[np.linspace(0, len(idx) - 1, limit).astype(np.int64)]


class ClusterPlanePanel(Panel):
    panel_id = "unit_plane"
    title = "Cluster plane"

    def __init__(self, bench, runner, controller, parent=None):
        super().__init__(bench, runner, parent)
        self.ctl = controller
        self.x_combo, self.y_combo = QComboBox(), QComboBox()
        for combo in (self.x_combo, self.y_combo):
            combo.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToContents)
            combo.currentIndexChanged.connect(self.redraw)
        preset = QPushButton("time × peak")
        preset.setToolTip("Show peak amplitude over time (split drifting units here)")
        preset.clicked.connect(lambda: self.set_axes(AXIS_TIME, AXIS_AMPLITUDE))
        self.split_button = QPushButton("Split (outline)")
        self.split_button.setToolTip("Click vertices around the events that leave the selected unit; "
                                     "click the first vertex or double-click to close; right-click cancels")
        self.split_button.clicked.connect(lambda: self.start_outline("split"))
        self.choose_button = QPushButton("Choose (outline)")
        self.choose_button.setToolTip("Outline events to move them to another unit, a new unit or no unit")
        self.choose_button.clicked.connect(lambda: self.start_outline("choose"))
        self.move_button = QToolButton()
        self.move_button.setText("Move chosen to")
        self.move_button.setPopupMode(QToolButton.ToolButtonPopupMode.InstantPopup)
        self.move_menu = QMenu(self.move_button)
        self.move_menu.aboutToShow.connect(self._fill_move_menu)
        self.move_button.setMenu(self.move_menu)
        top = QHBoxLayout()
        for w in (QLabel("x:"), self.x_combo, QLabel("y:"), self.y_combo, preset):
            top.addWidget(w)
        tools = QHBoxLayout()
        for w in (self.split_button, self.choose_button, self.move_button):
            tools.addWidget(w)
        tools.addStretch(1)
        self.plot = palette.make_plot()
        pi = self.plot.getPlotItem()
        self.background = OneStyleScatter(size=3, pen=None, brush=pg.mkBrush(*palette.GREY, 70))
        self.chosen = pg.ScatterPlotItem(size=9, pen=palette.pen(palette.BLACK, 1.2), brush=None, symbol="o")
        self.chosen.setZValue(20)
        pi.addItem(self.background)
        pi.addItem(self.chosen)
        self.unit_items: list[pg.ScatterPlotItem] = []
        self.tool = PolygonTool(pi)
        self.tool.finished.connect(self._outline_done)
        self.tool.cancelled.connect(lambda: self.status.setText("Outline cancelled."))
        self.status = QLabel("")
        self.status.setWordWrap(True)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addLayout(top)
        lay.addLayout(tools)
        lay.addWidget(self.plot, 1)
        lay.addWidget(self.status)
        self.group: int | None = None
        controller.sorting_replaced.connect(self._on_sorting)
        controller.units_changed.connect(self.redraw)
        controller.selection_changed.connect(self.redraw)
        controller.events_selected.connect(self._show_chosen)
        self._on_sorting()

    # ---- axes --------------------------------------------------------------------------------
    def _on_sorting(self) -> None:
        s = self.ctl.sorting
        for combo, default in ((self.x_combo, 0), (self.y_combo, 1)):
            combo.blockSignals(True)
            current = combo.currentData()
            combo.clear()
            if s is not None:
                axes = [a for a in s.data.axes if a.startswith(FEATURE_AXIS_PREFIX)] + [AXIS_TIME, AXIS_AMPLITUDE]
                for a in axes:
                    combo.addItem(axis_text(a), a)
                i = combo.findData(current)
                combo.setCurrentIndex(i if i >= 0 else min(default, len(axes) - 1))
            combo.blockSignals(False)
        self.redraw()

    def set_axes(self, x_axis: str, y_axis: str) -> None:
        for combo, axis in ((self.x_combo, x_axis), (self.y_combo, y_axis)):
            combo.blockSignals(True)
            combo.setCurrentIndex(combo.findData(axis))
            combo.blockSignals(False)
        self.redraw()

    @property
    def axes(self) -> tuple[str, str]:
        return self.x_combo.currentData(), self.y_combo.currentData()

    # ---- drawing -----------------------------------------------------------------------------
    def shown_group(self) -> int | None:
        s = self.ctl.sorting
        if s is None:
            return None
        if self.ctl.selection:
            return s.group_of(self.ctl.selection[0])
        return int(self.bench.group)

    def redraw(self, *_) -> None:
        """Draw the shown group's events now, or when the panel next comes into view."""
        self.when_shown(self._redraw_now)

    def _redraw_now(self) -> None:
        pi = self.plot.getPlotItem()
        for item in self.unit_items:
            pi.removeItem(item)
        self.unit_items = []
        s = self.ctl.sorting
        if s is None or self.x_combo.currentData() is None:
            self.background.setData([], [])
            self.chosen.setData([], [])
            self.status.setText("The cluster plane shows units once there are some.")
            return
        self.group = g = self.shown_group()
        xa, ya = self.axes
        in_group = np.flatnonzero(s.data.group == g)
        assigned = s.assignments[in_group]
        shown = [s.events_of(u) for u in self.ctl.selection]
        rest = in_group[~np.isin(in_group, np.concatenate(shown))] if shown else in_group
        rest = _thin(rest, BACKGROUND_LIMIT)
        self.background.setData(s.data.axis_values(xa, rest), s.data.axis_values(ya, rest))
        for u in self.ctl.selection:
            idx = _thin(s.events_of(u), UNIT_LIMIT)
            item = OneStyleScatter(s.data.axis_values(xa, idx), s.data.axis_values(ya, idx), size=4, pen=None,
                                   brush=pg.mkBrush(*self.ctl.unit_colour(u), 170))
            pi.addItem(item)
            self.unit_items.append(item)
        palette.style_plot(pi, axis_text(xa), axis_text(ya))
        self._show_chosen()
        units = ", ".join(self.ctl.unit_name(u) for u in self.ctl.selection) or "none (select units in the unit list)"
        n_art = int(s.data.artefact[in_group].sum())
        n_free = int(np.sum((assigned == NO_UNIT) & ~s.data.artefact[in_group]))
        why = f" ({n_art:,} artefacts kept for sorting, in no unit)" if n_art else ""
        how = ("choose some by an outline and move them into a unit" if pool_id(g) in self.ctl.selection
               else "select the group's unassigned row in the unit list to see them")
        why += f" ({n_free:,} unassigned: {how})" if n_free else ""
        self.status.setText(f"{self.ctl.group_name(g)}: {len(in_group):,} events{why} (grey: not selected). "
                            f"Selected units: {units}.")

    def _show_chosen(self) -> None:
        s, idx = self.ctl.sorting, self.ctl.selected_events
        if s is None or not len(idx):
            self.chosen.setData([], [])
            return
        xa, ya = self.axes
        self.chosen.setData(s.data.axis_values(xa, idx), s.data.axis_values(ya, idx))

    # ---- outlines ----------------------------------------------------------------------------
    def start_outline(self, purpose: str) -> bool:
        s = self.ctl.sorting
        if s is None:
            self.status.setText("No units to outline yet.")
            return False
        if purpose == "split" and (len(self.ctl.selection) != 1 or pool_group(self.ctl.selection[0]) is not None):
            self.status.setText("Select exactly one unit to split, then draw its outline (unassigned events: "
                                "choose them by an outline and move them).")
            return False
        self.tool.start(purpose)
        what = "the events that leave the unit" if purpose == "split" else "the events to choose"
        self.status.setText(f"Click vertices around {what}; click the first vertex or double-click to close, "
                            f"right-click to cancel.")
        return True

    def _outline_done(self, vertices: np.ndarray) -> None:
        xa, ya = self.axes
        if self.tool.purpose == "split":
            if len(self.ctl.selection) == 1:
                self.ctl.split(self.ctl.selection[0], xa, ya, vertices)
            return
        s = self.ctl.sorting
        pool = (np.concatenate([s.events_of(u) for u in self.ctl.selection]) if self.ctl.selection
                else np.flatnonzero(s.data.group == self.group))
        inside = points_in_polygon(s.data.axis_values(xa, pool), s.data.axis_values(ya, pool), vertices)
        self.ctl.select_events(pool[inside])
        self.status.setText(f"{int(inside.sum())} events chosen; move them with “Move chosen events to”.")

    def _fill_move_menu(self) -> None:
        self.move_menu.clear()
        s = self.ctl.sorting
        if s is None or not len(self.ctl.selected_events):
            self.move_menu.addAction("(choose events by outline first)").setEnabled(False)
            return
        self.move_menu.addAction("a new unit", lambda: self.ctl.move_events(None))
        self.move_menu.addAction("no unit (leave unsorted)", lambda: self.ctl.move_events(NO_UNIT))
        g = int(s.data.group[self.ctl.selected_events[0]])
        for u, rec in s.units.items():
            if rec.group == g:
                self.move_menu.addAction(f"unit {u} ({rec.label})", lambda u=u: self.ctl.move_events(u))
