"""The suggestions panel: candidate merges and splits, best first, each with its numbers.

One row per suggestion: what it proposes, its score and the evidence in short; the row's tooltip
holds every number with its meaning. Choosing a row selects its units (so the unit plots show
their waveforms and correlograms); Accept does the step, Reject remembers the rejection in the
session. Both are steps on the undo stack.
"""

from __future__ import annotations

import math

from PySide6.QtCore import Qt
from PySide6.QtWidgets import (
    QAbstractItemView,
    QHBoxLayout,
    QLabel,
    QPushButton,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
)

from rigside.core.quality.suggestions import MERGE_EVIDENCE, SPLIT_EVIDENCE, Suggestion
from rigside.gui.panels.base import Panel
from rigside.gui.panels.table_columns import fit_columns
from rigside.gui.panels.units import plain_tooltip

HEADERS = ("#", "suggestion", "score", "evidence")
EVIDENCE_WIDTH = 520
"""Widest the evidence column is fitted (pixels); the whole evidence is in the row's tooltip."""


def _num(value: float, fmt: str = ".2f") -> str:
    return "—" if not math.isfinite(value) else format(value, fmt)


def evidence_text(s: Suggestion) -> str:
    """The evidence of a suggestion, one short line per piece."""
    e = s.evidence
    if s.kind == "merge":
        parts = [f"waveform {_num(e['waveform_similarity'])}" if "waveform_similarity" in e else "waveform —",
                 f"refractory dip {_num(e['refractory_dip'])} ({e['refractory_pairs']:.0f} of "
                 f"{e['expected_pairs']:.1f} pairs)",
                 f"overlap {_num(e['feature_overlap'])}"]
        if math.isfinite(e["continuity"]):
            parts.append(f"continuity {_num(e['continuity'])}")
        return "\n".join(parts)
    return "\n".join([f"two parts {'win' if e['delta_bic_per_event'] > 0 else 'lose'} "
                       f"(overlap {_num(e['part_overlap'])}, misclassified {_num(e['misclassification'])}, "
                       f"smaller {e['smaller_part']:.0%})",
                       f"own refractory dip {_num(e['own_dip'])}",
                       f"refractory dip between the parts {_num(e['parts_dip'])}",
                       f"on a 2nd channel {e['second_channel_share']:.0%}"])


def evidence_tooltip(s: Suggestion) -> str:
    """Every number of a suggestion with what it means, and its notes."""
    meanings = MERGE_EVIDENCE if s.kind == "merge" else SPLIT_EVIDENCE
    lines = [f"{s.text} (score {s.score:.2f}, a ranking aid)"]
    lines += [f"{name} = {_num(s.evidence[name], '.4g')}: {what}" for name, what in meanings.items()
              if name in s.evidence]
    lines += [f"note: {n}" for n in s.notes]
    return plain_tooltip("\n".join(lines))


class SuggestionsPanel(Panel):
    """Candidate merges and splits with Accept and Reject."""

    panel_id = "suggestions"
    title = "Suggestions"

    def __init__(self, bench, runner, controller, units, parent=None):
        super().__init__(bench, runner, parent)
        self.ctl, self.units = controller, units
        self.status = QLabel()
        self.status.setWordWrap(True)
        self.table = QTableWidget(0, len(HEADERS))
        self.table.setHorizontalHeaderLabels(HEADERS)
        self.table.verticalHeader().setVisible(False)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.table.setWordWrap(True)
        self.table.setAlternatingRowColors(True)
        self.table.itemSelectionChanged.connect(self._chosen)
        self.accept_button = QPushButton("Accept")
        self.accept_button.setToolTip("Do the suggested step (merge the two units, or split the unit into the "
                                      "two parts of its evidence)")
        self.reject_button = QPushButton("Reject")
        self.reject_button.setToolTip("Not offered again while these units keep their events (undoable)")
        self.refresh_button = QPushButton("Weigh again")
        self.accept_button.clicked.connect(lambda: self._act(self.ctl.accept))
        self.reject_button.clicked.connect(lambda: self._act(self.ctl.reject))
        self.refresh_button.clicked.connect(self.ctl.refresh)
        buttons = QHBoxLayout()
        for b in (self.accept_button, self.reject_button):
            buttons.addWidget(b)
        buttons.addStretch(1)
        buttons.addWidget(self.refresh_button)
        layout = QVBoxLayout(self)
        layout.addWidget(self.status)
        layout.addWidget(self.table, 1)
        layout.addLayout(buttons)
        controller.changed.connect(self.rebuild)
        self.rebuild()

    def current(self) -> Suggestion | None:
        """The suggestion of the chosen row, if any."""
        rows = self.table.selectionModel().selectedRows()
        return self.ctl.suggestions[rows[0].row()] if rows and rows[0].row() < len(self.ctl.suggestions) else None

    def rebuild(self) -> None:
        self.status.setText(self.ctl.status)
        found = self.ctl.suggestions
        self.table.blockSignals(True)
        self.table.setRowCount(len(found))
        for r, s in enumerate(found):
            tip = evidence_tooltip(s)
            for c, text in enumerate((str(r + 1), s.text, f"{s.score:.2f}", evidence_text(s))):
                item = QTableWidgetItem(text)
                item.setToolTip(tip)
                if c in (0, 2):
                    item.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
                self.table.setItem(r, c, item)
        self.table.blockSignals(False)
        fit_columns(self.table, {3: EVIDENCE_WIDTH})
        self.table.resizeRowsToContents()
        self._enable()

    def _enable(self) -> None:
        chosen = self.current() is not None
        self.accept_button.setEnabled(chosen)
        self.reject_button.setEnabled(chosen)
        self.refresh_button.setEnabled(self.units.sorting is not None)

    def _chosen(self) -> None:
        s = self.current()
        if s is not None:
            self.units.set_selection(list(s.units))
        self._enable()

    def _act(self, step) -> None:
        s = self.current()
        if s is not None:
            step(s)
