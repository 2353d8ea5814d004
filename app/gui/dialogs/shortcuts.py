"""A table of the window's keyboard shortcuts, built from its actions."""

from __future__ import annotations

from PySide6.QtWidgets import QDialog, QDialogButtonBox, QHeaderView, QTableWidget, QTableWidgetItem, QVBoxLayout


def _keys(action) -> str:
    """The action's keys, and where they work when that is not the whole window (its
    ``shortcut_scope`` property, e.g. "in the unit list")."""
    keys = ", ".join(k.toString() for k in action.shortcuts())
    scope = action.property("shortcut_scope")
    return f"{keys} ({scope})" if scope else keys


class ShortcutsDialog(QDialog):
    """Lists (action, keys) for every action that has a shortcut."""

    def __init__(self, actions, parent=None):
        super().__init__(parent)
        self.setWindowTitle("Keyboard shortcuts")
        rows = [(a.text().replace("&", "").rstrip("…").rstrip("."), _keys(a)) for a in actions if a.shortcuts()]
        self.table = QTableWidget(len(rows), 2)
        self.table.setHorizontalHeaderLabels(["Action", "Keys"])
        self.table.verticalHeader().setVisible(False)
        self.table.verticalHeader().setDefaultSectionSize(22)
        for i, (name, keys) in enumerate(rows):
            self.table.setItem(i, 0, QTableWidgetItem(name))
            self.table.setItem(i, 1, QTableWidgetItem(keys))
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
        self.table.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Close)
        buttons.rejected.connect(self.reject)
        lay = QVBoxLayout(self)
        lay.addWidget(self.table)
        lay.addWidget(buttons)
        self.resize(460, 520)

    def rows(self) -> list[tuple[str, str]]:
        return [(self.table.item(i, 0).text(), self.table.item(i, 1).text())
                for i in range(self.table.rowCount())]
