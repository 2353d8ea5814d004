"""What the per-unit plots share: the controller, one plot, a row of bin controls, a status line.

A view redraws when the selection changes, when a step touches a selected unit, and when a
new sorting arrives. Each selected unit is drawn in its selection colour.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QDoubleSpinBox, QHBoxLayout, QLabel, QVBoxLayout, QWidget

from rigside.core.units.sorting import NO_UNIT, pool_group
from rigside.gui import palette
from rigside.gui.fields import double_spin

MAX_SHOWN = 6
"""At most this many selected units are drawn (the first ones selected)."""


def spin(value: float, low: float, high: float, step: float, suffix: str, decimals: int = 1,
         tip: str = "") -> QDoubleSpinBox:
    """A plot's number field (:func:`rigside.gui.fields.double_spin`) that reports once editing ends."""
    s = double_spin(value, low, high, decimals, suffix, tip, step)
    s.setKeyboardTracking(False)
    return s


class UnitView(QWidget):
    """Base of the per-unit views; subclasses implement :meth:`draw`."""

    title = ""

    def __init__(self, controller, parent=None):
        super().__init__(parent)
        self.ctl = controller
        self.controls = QHBoxLayout()
        self.controls.setContentsMargins(0, 0, 0, 0)
        head = QLabel(f"<b>{self.title}</b>")
        self.controls.addWidget(head)
        self.controls.addStretch(1)
        self.status = QLabel("")
        self.status.setWordWrap(True)
        self.layout_ = QVBoxLayout(self)
        self.layout_.setContentsMargins(2, 2, 2, 2)
        self.layout_.setSpacing(2)
        self.layout_.addLayout(self.controls)
        controller.selection_changed.connect(self.refresh)
        controller.sorting_replaced.connect(self.refresh)
        controller.units_changed.connect(self._on_units_changed)

    def add_control(self, label: str, widget: QWidget) -> QWidget:
        if hasattr(widget, "setPrefix"):
            widget.setPrefix(label + " ")
        else:
            self.controls.addWidget(QLabel(label))
        self.controls.addWidget(widget)
        if isinstance(widget, QDoubleSpinBox):
            widget.valueChanged.connect(self.refresh)
        return widget

    def finish_layout(self, *plots: QWidget) -> None:
        for p in plots:
            self.layout_.addWidget(p, 1)
        self.layout_.addWidget(self.status)

    def _on_units_changed(self, change) -> None:
        sel = set(self.ctl.selection)
        pools = NO_UNIT in change.members and any(pool_group(u) is not None for u in sel)
        if set(change.touched) & sel or change.removed or pools:
            self.refresh()

    def shown_units(self) -> list[int]:
        return self.ctl.selection[:MAX_SHOWN]

    def plot_key(self, view) -> str:
        """The colour of each unit shown (rich text), for saved pictures."""
        units = self.shown_units() if self.ctl.sorting is not None else []
        return palette.key([("■", self.ctl.unit_colour(u), self.ctl.unit_name(u)) for u in units])

    def unit_times(self, unit: int) -> np.ndarray:
        s = self.ctl.sorting
        return np.sort(s.data.time_s[s.events_of(unit)])

    def refresh(self, *_) -> None:
        units = self.shown_units() if self.ctl.sorting is not None else []
        self.draw(units)
        if not units:
            self.status.setText("Select units in the unit list to see them here.")

    def draw(self, units: list[int]) -> None:
        raise NotImplementedError


def step_curve(edges: np.ndarray, counts: np.ndarray, colour, scale: float = 1.0) -> pg.PlotCurveItem:
    """A histogram as a stepped outline (x in ``edges * scale``)."""
    return pg.PlotCurveItem(np.asarray(edges) * scale, np.asarray(counts, dtype=np.float64), stepMode="center",
                            pen=palette.pen(colour, 1.6))


HISTOGRAM_MEANINGS = {
    "histogram": "isi (intervals between consecutive spikes of a unit), auto (autocorrelogram of a unit) or "
                 "cross (spikes of unit B at lags after spikes of unit A)",
    "unit": "the unit (unit A of a cross-correlogram)",
    "other_unit": "unit B of a cross-correlogram (empty otherwise)",
    "bin_start_ms": "start of the bin [ms]",
    "bin_end_ms": "end of the bin [ms]",
    "count": "intervals or spike pairs in the bin [count]",
}


def histogram_table(title: str, rows: list[tuple[str, int, int | str, np.ndarray, np.ndarray]]) -> dict:
    """A described table of drawn histograms: ``rows`` of (kind, unit, other unit or "", edges in ms,
    counts); one line per bin (see :data:`HISTOGRAM_MEANINGS`)."""
    table: dict[str, list] = {k: [] for k in HISTOGRAM_MEANINGS}
    for kind, unit, other, edges, counts in rows:
        n = len(counts)
        table["histogram"] += [kind] * n
        table["unit"] += [unit] * n
        table["other_unit"] += [other] * n
        table["bin_start_ms"] += list(edges[:-1])
        table["bin_end_ms"] += list(edges[1:])
        table["count"] += [int(v) for v in counts]
    return {"title": [title], "meanings": HISTOGRAM_MEANINGS, "table": table}
