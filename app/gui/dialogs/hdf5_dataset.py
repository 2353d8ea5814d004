"""Ask which dataset of an HDF5 file (or which ElectricalSeries of an NWB file) holds the recording when
it holds several."""

from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import QComboBox, QDialog, QDialogButtonBox, QLabel, QVBoxLayout


class DatasetDialog(QDialog):
    """A choice among the candidate 2-D datasets (samples x channels) or NWB electrical series."""

    def __init__(self, path: str | Path, candidates: list[str], parent=None, nwb: bool = False):
        super().__init__(parent)
        self.setWindowTitle("Which series is the recording?" if nwb else "Which dataset is the recording?")
        ask = ("NWB electrical series. Choose the one to open:" if nwb
               else "two-dimensional datasets. Choose the one stored as samples x channels:")
        note = QLabel(f"<b>{Path(path).name}</b> holds {len(candidates)} {ask}")
        note.setWordWrap(True)
        self.choice = QComboBox()
        self.choice.addItems(candidates)
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Open | QDialogButtonBox.StandardButton.Cancel)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        lay = QVBoxLayout(self)
        for w in (note, self.choice, buttons):
            lay.addWidget(w)

    def dataset(self) -> str:
        return self.choice.currentText()
