"""The audit view: one row per imported unit (support, closest fresh unit, the two estimates and
quality numbers), the caution that both sides are estimates, progress of a running audit,
the exports, and the chosen unit beside its closest fresh unit (:mod:`app.panels.audit_pair`).

An undefined number shows "—" with its reason as a tooltip; every header explains its
column (the meanings of the audit table's CSV).
"""

from __future__ import annotations

import html
import math

import numpy as np
from PySide6.QtCore import Qt
from PySide6.QtWidgets import (
    QAbstractItemView,
    QHBoxLayout,
    QLabel,
    QProgressBar,
    QPushButton,
    QSplitter,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from rigside.core.audit.run import CAUTION
from rigside.core.audit.table import ALL_COLUMNS, PROBE_COLUMNS
from rigside.core.numbers import format_number
from rigside.core.quality.unit_table import CAUTION as QUALITY_CAUTION
from rigside.gui import palette
from rigside.gui.audit_controller import AUDIT_LABEL, AuditController
from rigside.gui.panels.audit_pair import AuditPairPlots
from rigside.gui.panels.base import Panel
from rigside.gui.panels.table_columns import fit_columns

# (header, table column, scale, format)
TABLE_SPECS = (
    ("imported\nunit", "unit", 1, ""),
    ("spikes", "n_spikes", 1, "d"),
    ("depth\nµm", "y_um", 1, ".0f"),   # beside the unit: on a probe its place is how it is known
    ("backed by\nevents (%)", "matched_fraction", 100, ".1f"),
    ("closest\nfresh unit", "closest_fresh_unit", 1, ""),
    ("overlap\n(Jaccard)", "overlap_jaccard", 1, ".2f"),
    ("possible false\npositives (%)", "false_positive_estimate", 100, ".1f"),
    ("possible\nmisses (%)", "miss_estimate", 100, ".1f"),
    ("ISI con-\ntam. (%)", "contamination", 100, ".1f"),
    ("isolation\ndistance", "isolation_distance", 1, ".1f"),
    ("L-ratio", "l_ratio", 1, ".3g"),
    ("SNR", "snr", 1, ".1f"),
    ("presence\n(%)", "presence_ratio", 100, ".0f"),
    ("notes", "notes", 1, ""),
)
DEPTH_COLUMN = [s[1] for s in TABLE_SPECS].index("y_um")
"""Shown on a probe only (the audit table has positions there)."""
UNIT_ROLE = Qt.ItemDataRole.UserRole + 1
NOTES_WIDTH = 320
"""Widest the notes column is fitted to its notes (pixels); the whole text is in its tooltip."""


class SortItem(QTableWidgetItem):
    """A cell sorted by a number (undefined numbers last), not by its text."""

    def __init__(self, text: str, key: float):
        super().__init__(text)
        self.key = key

    def __lt__(self, other) -> bool:
        a, b = self.key, getattr(other, "key", math.inf)
        return (math.isnan(b) and not math.isnan(a)) or a < b


def reason_of(row: dict, key: str) -> str:
    for name in (f"{key}_reason", "amplitude_drift_reason" if key.startswith("amplitude_") else ""):
        if name and row.get(name):
            return str(row[name])
    return ""


def cell(row: dict, key: str, scale: float, fmt: str) -> SortItem:
    """The table cell of one value (text, sort key, tooltip)."""
    v = row.get(key, math.nan)
    if key == "closest_fresh_unit":
        text = "none" if row["closest_fresh_label"] == "" else f"{int(v)} ({row['closest_fresh_label']})"
        item = SortItem(text, float(v) if text != "none" else math.nan)
        item.setToolTip(f"{row['shared_spikes']} shared of its {row['closest_fresh_spikes']} spikes")
        return item
    if key == "notes":
        parts = [p for p in (row["notes"], f"quality: {row['quality_flags']}" if row["quality_flags"] else "") if p]
        item = SortItem("; ".join(parts), float(len(parts)))
        item.setToolTip("; ".join(parts))
        return item
    x = float(v)
    if math.isnan(x):
        item = SortItem("—", math.nan)
        item.setToolTip(reason_of(row, key) or "undefined")
        return item
    return SortItem(format_number(x * scale, signed=fmt.startswith("+")) if fmt != "d" else str(int(x)), x)


class AuditPanel(Panel):
    """Table of imported units on the left, the chosen pair on the right."""

    panel_id = "audit"
    title = "Audit of an earlier sorting"

    def __init__(self, bench, runner, controller: AuditController, parent: QWidget | None = None):
        super().__init__(bench, runner, parent)
        self.ctl = controller
        self.state = QLabel("Import earlier spike times (Audit > Import earlier spike times…) to check them "
                            "against a fresh look at the raw data of the open recording.")
        self.state.setWordWrap(True)
        self.caution = QLabel(f"<b>Caution:</b> {html.escape(CAUTION)} {html.escape(QUALITY_CAUTION)}")
        self.caution.setWordWrap(True)
        self.caution.setStyleSheet(f"QLabel {{ background: rgba({palette.YELLOW[0]}, {palette.YELLOW[1]}, "
                                   f"{palette.YELLOW[2]}, 70); border: 1px solid {palette.hex_colour(palette.ORANGE)}; "
                                   "padding: 4px; }")
        self.progress = QProgressBar()
        self.progress.setRange(0, 1000)
        self.cancel_button = QPushButton("Cancel the audit")
        self.cancel_button.clicked.connect(controller.cancel)
        self.import_button = QPushButton("Import earlier spike times…")
        self.report_button = QPushButton("Save report (HTML)…")
        self.table_button = QPushButton("Save table (CSV)…")
        self.report_button.setToolTip("A self-contained HTML report: the table, the overlap (Jaccard) matrix and "
                                      "per-unit plots beside the closest fresh unit")
        self.table_button.setToolTip("One row per imported unit with every audit column and quality number")

        self.table = QTableWidget(0, len(TABLE_SPECS))
        self.table.setHorizontalHeaderLabels([s[0] for s in TABLE_SPECS])
        for j, (_, key, _, _) in enumerate(TABLE_SPECS):
            self.table.horizontalHeaderItem(j).setToolTip((ALL_COLUMNS | PROBE_COLUMNS)[key])
        self.table.verticalHeader().setVisible(False)
        self.table.verticalHeader().setDefaultSectionSize(22)
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.table.setSortingEnabled(True)
        self.table.horizontalHeader().sortIndicatorChanged.connect(self._fit_columns)
        self.table.itemSelectionChanged.connect(self._on_row)
        self._plots: AuditPairPlots | None = None   # built when first shown or asked for: see ``plots``

        buttons = QHBoxLayout()
        for w in (self.import_button, self.report_button, self.table_button):
            buttons.addWidget(w)
        buttons.addStretch(1)
        running = QHBoxLayout()
        running.addWidget(self.progress, 1)
        running.addWidget(self.cancel_button)
        left = QWidget()
        lay = QVBoxLayout(left)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addLayout(buttons)
        lay.addWidget(self.state)
        lay.addLayout(running)
        lay.addWidget(self.caution)
        lay.addWidget(self.table, 1)
        self.splitter = QSplitter(Qt.Orientation.Horizontal)
        self.splitter.addWidget(left)
        self.splitter.addWidget(QWidget())     # the plots' place
        self.splitter.setStretchFactor(0, 4)
        self.splitter.setStretchFactor(1, 5)
        self.splitter.setSizes([800, 1000])
        outer = QVBoxLayout(self)
        outer.setContentsMargins(2, 2, 2, 2)
        outer.addWidget(self.splitter)

        controller.result_changed.connect(self._fill)
        controller.pair_changed.connect(self._draw_pair)
        controller.state_changed.connect(self._on_state)
        runner.started.connect(lambda label: self._running(label, True))
        runner.finished.connect(lambda label, _outcome: self._running(label, False))
        runner.progressed.connect(self._on_progress)
        self._running(AUDIT_LABEL, False)
        self._fill()

    @property
    def plots(self) -> AuditPairPlots:
        """The pair plots, built the first time the view is shown or they are asked for (most windows never
        show an audit, and three plots cost a noticeable part of the window's start)."""
        if self._plots is None:
            self._plots = AuditPairPlots(self.bench)
            sizes = self.splitter.sizes()
            self.splitter.replaceWidget(1, self._plots).deleteLater()
            self.splitter.setStretchFactor(1, 5)
            self.splitter.setSizes(sizes)
            self._draw_pair()
        return self._plots

    def showEvent(self, event) -> None:
        self.plots  # noqa: B018 - built before the view is first drawn
        super().showEvent(event)

    # ---- state ----------------------------------------------------------------------------
    def _on_state(self, text: str) -> None:
        if text or self.ctl.result is None:
            self.state.setText(text or "Import earlier spike times to audit them.")

    def _running(self, label: str, started: bool) -> None:
        if label != AUDIT_LABEL:
            return
        busy = started or self.ctl.busy()
        self.progress.setVisible(busy)
        self.cancel_button.setVisible(busy)
        if started:
            self.progress.setValue(0)

    def _on_progress(self, label: str, fraction: float, message: str) -> None:
        if label == AUDIT_LABEL:
            self.progress.setValue(int(1000 * fraction))
            self.progress.setFormat(f"{message} (%p%)" if message else "%p%")

    # ---- the table ----------------------------------------------------------------------------
    def _fill(self) -> None:
        r = self.ctl.result
        for b in (self.report_button, self.table_button):
            b.setEnabled(r is not None)
        self.table.blockSignals(True)
        self.table.setSortingEnabled(False)
        self.table.clearContents()
        ids = r.imported_ids if r is not None else np.zeros(0, dtype=np.int64)
        self.table.setRowCount(len(ids))
        self.table.setColumnHidden(DEPTH_COLUMN, r is None or "y_um" not in r.table)
        for i, u in enumerate(ids):
            row = r.row(int(u))
            for j, (_, key, scale, fmt) in enumerate(TABLE_SPECS):
                # the unit as the file gives it, sorted by its code (ascending ids, natural order of names)
                item = SortItem(str(row["unit"]), float(u)) if key == "unit" else cell(row, key, scale, fmt)
                item.setData(UNIT_ROLE, int(u))
                if key != "notes":
                    item.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
                self.table.setItem(i, j, item)
        self.table.setSortingEnabled(True)
        self.table.sortByColumn(0, Qt.SortOrder.AscendingOrder)
        self.table.blockSignals(False)
        self._fit_columns()
        if len(ids):
            self.select_unit(int(ids[0]))
        elif self._plots is not None:
            self._plots.show_pair(None)

    def _fit_columns(self, *_) -> None:
        fit_columns(self.table, {len(TABLE_SPECS) - 1: NOTES_WIDTH})

    def unit_rows(self) -> list[int]:
        """Imported unit of each table row, in the order shown."""
        return [int(self.table.item(i, 0).data(UNIT_ROLE)) for i in range(self.table.rowCount())]

    def select_unit(self, unit: int) -> None:
        """Choose an imported unit (as a click on its row does)."""
        self.table.selectRow(self.unit_rows().index(int(unit)))

    def _on_row(self) -> None:
        rows = self.table.selectionModel().selectedRows()
        self.ctl.select(int(self.table.item(rows[0].row(), 0).data(UNIT_ROLE)) if rows else None)

    # ---- the pair ---------------------------------------------------------------------------
    def _draw_pair(self) -> None:
        pv, r = self.ctl.pair, self.ctl.result
        if pv is None or r is None:
            if self._plots is not None:     # plots built later start empty
                self._plots.show_pair(None)
            return
        mp = r.fresh.params.metrics
        self.plots.show_pair(pv, (mp.censored_ms, mp.refractory_ms), self._header(pv, r), int(pv.row["group"]))

    @staticmethod
    def _header(pv, r) -> str:
        row = pv.row
        imp = (f"<b style='color:{palette.hex_colour(palette.BLUE)}'>Imported unit {html.escape(str(row['unit']))}</b> "
               f"({row['n_spikes']} spikes, main channel {row['main_channel']})")
        if pv.fresh is None:
            return imp + ": no fresh unit shares a spike with it."
        q = r.fresh_quality(pv.fresh.unit)

        def pair_of(key: str, scale: float, fmt: str) -> str:
            a, b = float(row[key]), float(q[key])
            show = lambda x: "—" if math.isnan(x) else format_number(x * scale) if fmt != "d" else str(int(x))
            return f"{show(a)} vs {show(b)}"

        fresh = (f"<b style='color:{palette.hex_colour(palette.ORANGE)}'>fresh unit {pv.fresh.unit}</b> "
                 f"({row['closest_fresh_label']}, {row['closest_fresh_spikes']} spikes)")
        miss = row["miss_estimate"]
        notes = f"<br><i>{html.escape(row['notes'])}</i>" if row["notes"] else ""
        return (f"{imp} beside {fresh}: {row['shared_spikes']} spikes shared, "
                f"overlap (Jaccard) {row['overlap_jaccard']:.2f}; "
                f"possible false positives {100 * row['false_positive_estimate']:.1f} %, possible misses "
                f"{'—' if math.isnan(miss) else f'{100 * miss:.1f} %'} (estimates).<br>Imported vs fresh: "
                f"SNR {pair_of('snr', 1, '.1f')}, ISI contamination {pair_of('contamination', 100, '.1f')} %, "
                f"isolation distance {pair_of('isolation_distance', 1, '.1f')}" + notes)
