"""How to read an earlier sorting's spike file, and what to compare it with."""

from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import (
    QCheckBox,
    QDialog,
    QDialogButtonBox,
    QFormLayout,
    QLabel,
    QLineEdit,
    QVBoxLayout,
    QWidget,
)

from rigside.gui.audit_controller import ImportChoices
from rigside.gui.fields import double_spin


class AuditImportDialog(QDialog):
    """Rate of a ``sample`` column, HDF5 group, clock offset, matching tolerance, and whether
    to compare with the session's units (when the window holds a session) or a first pass."""

    def __init__(self, path: Path, recording_rate_hz: float, session_text: str | None, first_pass_text: str,
                 parent: QWidget | None = None):
        super().__init__(parent)
        self.setWindowTitle("Audit an earlier sorting")
        intro = QLabel(f"<b>{path.name}</b><br>Columns: <code>unit</code> and one of <code>time_s</code>, "
                       "<code>time_ms</code> or <code>sample</code> (see docs/audit.md).")
        intro.setWordWrap(True)
        self.rate = double_spin(recording_rate_hz, 1.0, 1e7, 3, " Hz",
                          "sampling rate of a 'sample' column (a rate stored in the file wins)")
        self.group = QLineEdit()
        self.group.setPlaceholderText("the file's root")
        self.group.setToolTip("HDF5 group holding the unit and time datasets")
        self.group.setEnabled(path.suffix.lower() in (".h5", ".hdf5"))
        self.offset = double_spin(0.0, -1e6, 1e6, 6, " s", "subtracted from every imported time (a clock that "
                            "started before the recording)")
        self.tolerance = double_spin(0.5, 0.01, 5.0, 2, " ms", "largest distance between matched spikes")
        self.use_session = QCheckBox(session_text or "no session of this recording is open")
        self.use_session.setChecked(session_text is not None)
        self.use_session.setEnabled(session_text is not None)
        self.use_session.setToolTip(f"unchecked: compare with {first_pass_text}")
        form = QFormLayout()
        form.addRow("Rate of samples", self.rate)
        form.addRow("HDF5 group", self.group)
        form.addRow("Clock offset", self.offset)
        form.addRow("Matching tolerance", self.tolerance)
        form.addRow("Compare with", self.use_session)
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel)
        buttons.button(QDialogButtonBox.StandardButton.Ok).setText("Audit")
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        lay = QVBoxLayout(self)
        lay.addWidget(intro)
        lay.addLayout(form)
        lay.addWidget(buttons)

    def choices(self) -> ImportChoices:
        group = self.group.text().strip() if self.group.isEnabled() else ""
        return ImportChoices(rate_hz=self.rate.value(), group=group or None, offset_s=self.offset.value(),
                             tolerance_ms=self.tolerance.value(), use_session=self.use_session.isChecked())
