"""The unit list: one row per unit with its label, counts and quality numbers, sortable.

Below the units, one row per channel group with unassigned events (the pool of events in no unit,
artefacts excluded: the fragment rule's leftovers and events moved out of every unit), in grey
italics, selectable like a unit so its events can be seen and outlined into one.

A number beyond its limit is marked three ways (a "!" before it, bold text and a tinted
cell) so the mark never rests on colour alone; an undefined number shows "—" with its
reason as a tooltip. Selected units carry their highlight colour in the id column. On a recording
with site positions two columns join before the note: the unit's depth and its drift along the probe.
"""

from __future__ import annotations

import html
import math

from PySide6.QtCore import (
    QAbstractTableModel,
    QItemSelection,
    QItemSelectionModel,
    QModelIndex,
    QSortFilterProxyModel,
    Qt,
)
from PySide6.QtGui import QBrush, QColor, QFont
from PySide6.QtWidgets import QAbstractItemView, QLabel, QTableView, QVBoxLayout

from rigside.core.numbers import format_number
from rigside.core.quality.unit_position import POSITION_COLUMNS
from rigside.core.quality.unit_table import CAUTION, COLUMNS
from rigside.core.quality.unit_table_io import reason_column
from rigside.core.units.sorting import LABELS, pool_group, pool_id
from rigside.gui import palette
from rigside.gui.panels.base import Panel
from rigside.gui.panels.table_columns import fit_columns, table_width

SORT_ROLE = Qt.ItemDataRole.UserRole + 1
NOTE_WIDTH = 240
"""Widest the note column is fitted to its notes (pixels); the whole note is in its tooltip."""


def plain_tooltip(text: str) -> str:
    """A tooltip that shows ``text`` literally (Qt renders tooltip text that looks like HTML as
    rich text, so user text is escaped inside a paragraph that keeps its line breaks)."""
    return f"<p style='white-space:pre-wrap'>{html.escape(text)}</p>"
FLAG_TINT = QColor(*palette.VERMILLION, 45)
POOL_LABEL = "unassigned"
POOL_WHY = "unassigned events form no unit: no quality numbers"
POOL_SORT_BASE = 1e12
"""Sort value of a pool row's id column (plus its group), so pools follow the units."""

# (header, table column or a fixed key, scale, format, header tooltip)
COLUMN_SPECS = (
    ("unit", "unit", 1, "d", "unit id"),
    ("group", "group", 1, "", "channel group"),
    ("label", "label", 1, "", "unreviewed, single unit, multi-unit or not neural (keys 0-3)"),
    ("events", "n_events", 1, "d", COLUMNS["n_events"]),
    ("rate\nHz", "rate_hz", 1, ".2f", COLUMNS["rate_hz"]),
    ("contam.\n%", "contamination", 100, ".1f", COLUMNS["contamination"]),
    ("iso.\ndist.", "isolation_distance", 1, ".1f", COLUMNS["isolation_distance"]),
    ("L-ratio", "l_ratio", 1, ".3g", COLUMNS["l_ratio"]),
    ("SNR", "snr", 1, ".1f", COLUMNS["snr"]),
    ("missed\n%", "missed_fraction", 100, ".1f", COLUMNS["missed_fraction"]),
    ("present\n%", "presence_ratio", 100, ".0f", COLUMNS["presence_ratio"]),
    ("drift\n%", "amplitude_change_fraction", 100, "+.1f", COLUMNS["amplitude_change_fraction"]),
    ("note", "note", 1, "", "free-text note"),
)
METRIC_KEYS = tuple(spec[1] for spec in COLUMN_SPECS[5:12])
POSITION_SPECS = (
    ("depth\nµm", "y_um", 1, ".0f", POSITION_COLUMNS["y_um"]),
    ("moves\nµm/min", "drift_um_per_min", 1, "+.1f", POSITION_COLUMNS["drift_um_per_min"]),
)
"""Columns of a probe recording's units (before the note)."""
POSITION_REASONS = {"y_um": None, "drift_um_per_min": "drift_reason"}
MEANINGS = COLUMNS | POSITION_COLUMNS


class UnitTableModel(QAbstractTableModel):
    """Rows from the controller's sorting and quality numbers (rebuilt on every change)."""

    def __init__(self, controller, parent=None):
        super().__init__(parent)
        self.ctl = controller
        self.rows: list[dict] = []
        self.flags_by_unit: dict[int, set[str]] = {}
        self.specs = COLUMN_SPECS

    def rebuild(self) -> None:
        self.beginResetModel()
        sorting, self.rows = self.ctl.sorting, []
        self.flags_by_unit = self.ctl.flags()
        probe = sorting is not None and self.ctl.events.y_um is not None
        self.specs = COLUMN_SPECS[:-1] + POSITION_SPECS + COLUMN_SPECS[-1:] if probe else COLUMN_SPECS
        if sorting is not None:
            counts, duration = sorting.counts(), self.ctl.events.duration_s
            for u, rec in sorting.units.items():
                row = {"unit": u, "group": self.ctl.group_name(rec.group), "group_id": rec.group,
                       "label": rec.label, "note": rec.note, "n_events": counts.get(u, 0),
                       "rate_hz": counts.get(u, 0) / duration}
                m = self.ctl.metrics.get(u)
                for key in METRIC_KEYS + (tuple(POSITION_REASONS) if probe else ()):
                    row[key] = float(m[key]) if m is not None else math.nan
                    rc = POSITION_REASONS[key] if key in POSITION_REASONS else reason_column(key)
                    row[key + ":why"] = (str(m[rc]) if rc else "") if m is not None else "not computed yet"
                if m is not None:
                    row["amplitude_change_fraction:slope"] = float(m["amplitude_slope_uv_per_min"])
                self.rows.append(row)
            self.rows += [self._pool_row(g, n, duration, probe) for g, n in sorting.pool_counts().items()]
        self.endResetModel()

    def _pool_row(self, group: int, n: int, duration: float, probe: bool) -> dict:
        row = {"unit": pool_id(group), "group": self.ctl.group_name(group), "group_id": group,
               "label": POOL_LABEL, "note": "", "n_events": n, "rate_hz": n / duration}
        for key in METRIC_KEYS + (tuple(POSITION_REASONS) if probe else ()):  # a pool has no position either
            row[key], row[key + ":why"] = math.nan, POOL_WHY
        return row

    def is_pool(self, row: int) -> bool:
        return pool_group(self.rows[row]["unit"]) is not None

    def rowCount(self, parent=QModelIndex()) -> int:
        return 0 if parent.isValid() else len(self.rows)

    def columnCount(self, parent=QModelIndex()) -> int:
        return 0 if parent.isValid() else len(self.specs)

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):
        if orientation != Qt.Orientation.Horizontal:
            return None
        if role == Qt.ItemDataRole.DisplayRole:
            return self.specs[section][0]
        if role == Qt.ItemDataRole.ToolTipRole:
            return self.specs[section][4]
        return None

    def unit_at(self, row: int) -> int:
        return int(self.rows[row]["unit"])

    def row_of(self, unit: int) -> int:
        return next((i for i, r in enumerate(self.rows) if r["unit"] == unit), -1)

    def flagged(self, row: int, key: str) -> bool:
        return key in self.flags_by_unit.get(self.rows[row]["unit"], set())

    def text(self, row: int, col: int) -> str:
        _, key, scale, fmt, _ = self.specs[col]
        value = self.rows[row][key]
        if key == "unit" and self.is_pool(row):
            return "·"
        if isinstance(value, str):
            return value
        if isinstance(value, float) and not math.isfinite(value):
            return "—"
        body = str(int(value)) if fmt == "d" else format_number(value * scale, signed=fmt.startswith("+")) \
            if fmt else str(value)
        return ("! " + body) if self.flagged(row, key) else body

    def data(self, index, role=Qt.ItemDataRole.DisplayRole):
        if not index.isValid():
            return None
        row, col = index.row(), index.column()
        key = self.specs[col][1]
        r = self.rows[row]
        if role == Qt.ItemDataRole.DisplayRole:
            return self.text(row, col)
        pool = self.is_pool(row)
        if role == SORT_ROLE:
            if key == "unit" and pool:
                return POOL_SORT_BASE + r["group_id"]
            v = r[key]
            return v if isinstance(v, str) else float(v)
        if pool and role == Qt.ItemDataRole.ForegroundRole:
            return QBrush(QColor(*palette.GREY))
        if pool and role == Qt.ItemDataRole.FontRole:
            f = QFont()
            f.setItalic(True)
            return f
        if pool and role == Qt.ItemDataRole.ToolTipRole and key in ("unit", "label", "n_events"):
            return (f"{r['n_events']} events of {r['group']} in no unit (artefacts excluded); select to see them, "
                    f"outline some in the cluster plane and move them into a unit")
        if role == Qt.ItemDataRole.TextAlignmentRole and not isinstance(r[key], str):
            return int(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        if role == Qt.ItemDataRole.DecorationRole and key == "unit":
            c = self.ctl.unit_colour(r["unit"])
            return QColor(*c) if c is not None else None
        if key in METRIC_KEYS or key in POSITION_REASONS:
            if role == Qt.ItemDataRole.BackgroundRole and self.flagged(row, key):
                return QBrush(FLAG_TINT)
            if role == Qt.ItemDataRole.FontRole and self.flagged(row, key):
                f = QFont()
                f.setBold(True)
                return f
            if role == Qt.ItemDataRole.ToolTipRole:
                return self._tooltip(row, key)
        if role == Qt.ItemDataRole.ToolTipRole and key == "note" and r["note"]:
            return plain_tooltip(r["note"])
        return None

    def _tooltip(self, row: int, key: str) -> str:
        r = self.rows[row]
        lines = [MEANINGS[key]]
        if key == "amplitude_change_fraction" and "amplitude_change_fraction:slope" in r:
            lines.append(f"slope: {r['amplitude_change_fraction:slope']:.3g} µV/min")
        if not math.isfinite(r[key]) and r[key + ":why"]:
            lines.append(f"undefined: {r[key + ':why']}")
        for lim in self.ctl.limits:
            if lim.column == key:
                state = ("not checked against" if not math.isfinite(r[key])
                         else "beyond" if self.flagged(row, key) else "within")
                lines.append(f"{state} the limit {lim.name}")
        lines.append(CAUTION)
        return "\n".join(lines)


class UnitSortProxy(QSortFilterProxyModel):
    """Numbers sort as numbers with undefined ones always last; text sorts as text."""

    def lessThan(self, left, right) -> bool:
        a, b = left.data(SORT_ROLE), right.data(SORT_ROLE)
        if isinstance(a, str) or isinstance(b, str):
            return str(a) < str(b)
        a_nan, b_nan = math.isnan(a), math.isnan(b)
        if a_nan or b_nan:
            descending = self.sortOrder() == Qt.SortOrder.DescendingOrder
            return (b_nan and not a_nan) != descending
        return a < b


class UnitListPanel(Panel):
    panel_id = "unit_list"
    title = "Units"

    def __init__(self, bench, runner, controller, parent=None):
        super().__init__(bench, runner, parent)
        self.ctl = controller
        self.model = UnitTableModel(controller, self)
        self.proxy = UnitSortProxy(self)
        self.proxy.setSourceModel(self.model)
        self.proxy.setSortRole(SORT_ROLE)
        self.table = QTableView()
        self.table.setModel(self.proxy)
        self.table.setSortingEnabled(True)
        self.table.sortByColumn(0, Qt.SortOrder.AscendingOrder)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.ExtendedSelection)
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.verticalHeader().setVisible(False)
        self.table.verticalHeader().setDefaultSectionSize(22)
        header = self.table.horizontalHeader()
        header.sortIndicatorChanged.connect(self._fit_columns)
        self.table.setContextMenuPolicy(Qt.ContextMenuPolicy.ActionsContextMenu)
        self.table.selectionModel().selectionChanged.connect(self._on_table_selection)
        self.summary = QLabel("No units yet: cluster the detection (Units menu) or open a session.")
        self.summary.setWordWrap(True)
        self.caution = QLabel()
        self.caution.setWordWrap(True)
        self.caution.setStyleSheet(f"color: {palette.hex_colour(palette.GREY)};")
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.summary)
        lay.addWidget(self.table, 1)
        lay.addWidget(self.caution)
        controller.sorting_replaced.connect(self.refresh)
        controller.units_changed.connect(self.refresh)
        controller.metrics_changed.connect(self.refresh)
        controller.selection_changed.connect(self._show_selection)
        self._syncing = False
        self.set_limits_text()

    def set_limits_text(self) -> None:
        limits = html.escape("; ".join(lim.name for lim in self.ctl.limits))
        self.caution.setText(f"<i>{html.escape(CAUTION)}</i> Marked “!” (bold, tinted): beyond a limit "
                             f"({limits}); “—”: undefined, the reason is in the tooltip.")

    def refresh(self, *_) -> None:
        self._syncing = True
        try:
            self.model.rebuild()
        finally:
            self._syncing = False
        self._fit_columns()
        self._show_selection()
        s = self.ctl.sorting
        if s is None:
            self.summary.setText("No units yet: cluster the detection (Units menu) or open a session.")
            return
        labels = [rec.label for rec in s.units.values()]
        done = sum(1 for u in s.units if u in self.ctl.metrics)
        d = self.ctl.session.params.detect
        made_at = f"{d.threshold_sigma:g} σ" if d.threshold_uv is None else f"{d.threshold_uv:g} µV"
        pools = s.pool_counts()
        free = (f"; {sum(pools.values()):,} events unassigned in {len(pools)} group{'s' if len(pools) > 1 else ''} "
                f"(grey rows)") if pools else ""
        self.summary.setText(f"{len(labels)} units from {len(s.data):,} events at {made_at} "
                             f"({', '.join(f'{labels.count(name)} {name}' for name in LABELS)}){free}; "
                             f"quality numbers for {done}.")

    def _on_table_selection(self, *_) -> None:
        if self._syncing:
            return
        rows = [self.proxy.mapToSource(i).row() for i in self.table.selectionModel().selectedRows()]
        chosen = {self.model.unit_at(r) for r in rows}
        order = [u for u in self.ctl.selection if u in chosen]
        order += sorted(chosen - set(order))
        self.ctl.set_selection(order)

    def _show_selection(self) -> None:
        sel = QItemSelection()
        for u in self.ctl.selection:
            r = self.model.row_of(u)
            if r >= 0:
                i = self.proxy.mapFromSource(self.model.index(r, 0))
                sel.select(i, i)
        self._syncing = True
        try:
            self.table.selectionModel().select(sel, QItemSelectionModel.SelectionFlag.ClearAndSelect
                                               | QItemSelectionModel.SelectionFlag.Rows)
            if self.ctl.selection:
                r = self.model.row_of(self.ctl.selection[0])
                if r >= 0:
                    self.table.scrollTo(self.proxy.mapFromSource(self.model.index(r, 0)))
        finally:
            self._syncing = False
        self.table.viewport().update()

    def _fit_columns(self, *_) -> None:
        fit_columns(self.table, {len(self.model.specs) - 1: NOTE_WIDTH})

    def wanted_width(self) -> int:
        """Width (pixels) showing every column without a horizontal scrollbar."""
        margins = self.layout().contentsMargins()
        return table_width(self.table) + margins.left() + margins.right()

    def select_rows(self, rows: list[int]) -> None:
        """Select table rows as shown (view order), as a user's clicks would."""
        sel = QItemSelection()
        for r in rows:
            i = self.proxy.index(r, 0)
            sel.select(i, i)
        self.table.selectionModel().select(sel, QItemSelectionModel.SelectionFlag.ClearAndSelect
                                           | QItemSelectionModel.SelectionFlag.Rows)
