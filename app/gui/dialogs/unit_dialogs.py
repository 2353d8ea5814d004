"""Small dialogs of the unit curation: clustering choices, part counts, notes and quality limits."""

from __future__ import annotations

from PySide6.QtWidgets import (
    QCheckBox,
    QDialog,
    QDialogButtonBox,
    QDoubleSpinBox,
    QFormLayout,
    QLabel,
    QPlainTextEdit,
    QSpinBox,
    QVBoxLayout,
    QWidget,
)

from rigside.core.quality.unit_table import COLUMNS
from rigside.core.quality.unit_table_io import Limit

AUTOMATIC = "automatic (BIC)"


def count_spin(low: int, value: int = 0) -> QSpinBox:
    """A cluster-count box whose lowest value means "chosen by BIC"."""
    spin = QSpinBox()
    spin.setRange(low - 1, 64)
    spin.setSpecialValueText(AUTOMATIC)
    spin.setValue(value if value >= low else low - 1)
    return spin


def spin_count(spin: QSpinBox) -> int | None:
    return None if spin.value() == spin.minimum() else spin.value()


class _Dialog(QDialog):
    def __init__(self, title: str, parent: QWidget | None):
        super().__init__(parent)
        self.setWindowTitle(title)
        self.form = QFormLayout()
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        lay = QVBoxLayout(self)
        lay.addLayout(self.form)
        lay.addWidget(buttons)


class ClusterDialog(_Dialog):
    """Clusters per group (automatic or fixed) and whether only the shown group is clustered."""

    def __init__(self, group_name: str, can_limit: bool, parent=None):
        super().__init__("Cluster the detection", parent)
        self.k = count_spin(1)
        self.k.setToolTip("clusters per channel group; automatic tries 1 to 8 and keeps the lowest BIC")
        self.only_group = QCheckBox(f"only {group_name} (an undoable step)")
        self.only_group.setEnabled(can_limit)
        note = QLabel("Events at the current threshold are clustered per channel group (Gaussian mixture, "
                      "seeded). A new detection starts a new set of units." if not can_limit else
                      "The units already hold these events: clustering again replaces them (undoable).")
        note.setWordWrap(True)
        self.form.addRow("clusters per group", self.k)
        self.form.addRow(self.only_group)
        self.form.addRow(note)


class PartsDialog(_Dialog):
    def __init__(self, unit: int, parent=None):
        super().__init__(f"Recluster unit {unit}", parent)
        self.k = count_spin(2)
        self.form.addRow("parts", self.k)


class NoteDialog(_Dialog):
    def __init__(self, unit: int, text: str, parent=None):
        super().__init__(f"Note on unit {unit}", parent)
        self.text = QPlainTextEdit(text)
        self.form.addRow(self.text)


class LimitsDialog(_Dialog):
    """One value per quality limit; a unit beyond it is marked in the unit list."""

    def __init__(self, limits: list[Limit], parent=None):
        super().__init__("Quality limits", parent)
        self.limits = list(limits)
        self.spins: list[QDoubleSpinBox] = []
        for lim in self.limits:
            s = QDoubleSpinBox()
            s.setDecimals(3)
            s.setRange(-1e6, 1e6)
            s.setValue(lim.value)
            s.setToolTip(COLUMNS[lim.column])
            self.spins.append(s)
            self.form.addRow(f"{lim.column} {'at most' if lim.kind == 'max' else 'at least'}", s)
        note = QLabel("These limits are conventions of the trade, not laws; fractions are 0 to 1.")
        note.setWordWrap(True)
        self.form.addRow(note)

    def values(self) -> list[Limit]:
        return [Limit(lim.column, lim.kind, s.value()) for lim, s in zip(self.limits, self.spins)]
