"""Ask how to read a raw binary file that has no metadata file beside it."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from PySide6.QtWidgets import (
    QComboBox,
    QDialog,
    QDialogButtonBox,
    QDoubleSpinBox,
    QFormLayout,
    QLabel,
    QSpinBox,
    QVBoxLayout,
)

from rigside.core.io.recording import DTYPES, META_SUFFIX, Layout, groups_of_size

UNSIGNED_CENTRE = {"uint16": 32768}
"""Stored value of 0 µV proposed for unsigned sample types."""


class RawLayoutDialog(QDialog):
    """Channels, sampling rate, sample type, gain, offset, header and group size."""

    def __init__(self, path: str | Path, parent=None):
        super().__init__(parent)
        self.setWindowTitle("How is this file laid out?")
        p = Path(path)
        size = p.stat().st_size if p.exists() else 0
        note = QLabel(f"<b>{p.name}</b> ({size:,} bytes) has no metadata file "
                      f"(<tt>{p.stem}{META_SUFFIX}</tt>) beside it. Describe the interleaved samples (kept in "
                      "that file when the folder is writable):")
        note.setWordWrap(True)
        self.channels = QSpinBox()
        self.channels.setRange(1, 4096)
        self.channels.setValue(16)
        self.rate = QDoubleSpinBox()
        self.rate.setRange(100.0, 1e6)
        self.rate.setDecimals(1)
        self.rate.setValue(30000.0)
        self.rate.setSuffix(" Hz")
        self.dtype = QComboBox()
        self.dtype.addItems(list(DTYPES))
        self.gain = QDoubleSpinBox()
        self.gain.setRange(-1e6, 1e6)
        self.gain.setDecimals(6)
        self.gain.setValue(0.195)
        self.gain.setSuffix(" µV per unit")
        self.offset = QDoubleSpinBox()
        self.offset.setRange(-1e9, 1e9)
        self.offset.setSuffix(" µV")
        self.offset_counts = QDoubleSpinBox()
        self.offset_counts.setRange(-(1 << 31), 1 << 32)
        self.offset_counts.setDecimals(0)
        self.offset_counts.setSuffix(" counts")
        self.offset_counts.setToolTip("Stored value of 0 µV, subtracted before the gain (32768 for "
                                      "unsigned 16-bit data centred on mid-range)")
        self.header = QSpinBox()
        self.header.setRange(0, 1 << 30)
        self.header.setSuffix(" bytes")
        self.group_size = QSpinBox()
        self.group_size.setRange(1, 4096)
        self.group_size.setValue(4)
        self.group_size.setToolTip("Consecutive channels that see the same spikes (e.g. 4 for 4-wire bundles)")
        form = QFormLayout()
        form.addRow("Channels:", self.channels)
        form.addRow("Sampling rate:", self.rate)
        form.addRow("Sample type:", self.dtype)
        form.addRow("Gain:", self.gain)
        form.addRow("Offset:", self.offset)
        form.addRow("Zero at stored value:", self.offset_counts)
        form.addRow("Header to skip:", self.header)
        form.addRow("Channels per group:", self.group_size)
        self.implied = QLabel("")
        self.implied.setWordWrap(True)
        self._size = size
        for w in (self.channels, self.header):
            w.valueChanged.connect(self._update_implied)
        self.rate.valueChanged.connect(self._update_implied)
        self.dtype.currentTextChanged.connect(self._update_implied)
        self.dtype.currentTextChanged.connect(self._centre_unsigned)
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Open | QDialogButtonBox.StandardButton.Cancel)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        lay = QVBoxLayout(self)
        lay.addWidget(note)
        lay.addLayout(form)
        lay.addWidget(self.implied)
        lay.addWidget(buttons)
        self._update_implied()

    def _centre_unsigned(self, dtype: str) -> None:
        """Unsigned 16-bit data are centred on 32768; the other types on 0 (an entered value stays)."""
        centre = UNSIGNED_CENTRE.get(dtype, 0)
        if self.offset_counts.value() in (0, *UNSIGNED_CENTRE.values()):
            self.offset_counts.setValue(centre)

    def _update_implied(self, *_) -> None:
        """Say what the entered layout makes of the file: its length, or why it cannot fit."""
        frame = np.dtype(self.dtype.currentText()).itemsize * self.channels.value()
        body = self._size - self.header.value()
        if body <= 0 or body % frame:
            self.implied.setText(f"<span style='color:#d55e00'>{max(body, 0):,} bytes after the header are "
                                 f"not a whole number of {frame}-byte frames: check channels, type and "
                                 "header.</span>")
        else:
            seconds = body // frame / self.rate.value()
            self.implied.setText(f"That makes {body // frame:,} samples per channel, {seconds:,.2f} s.")

    def layout_value(self) -> Layout:
        """The layout as entered (validated when the recording is opened)."""
        n = self.channels.value()
        return Layout(channels=n, rate_hz=float(self.rate.value()), dtype=self.dtype.currentText(),
                      gain_uv=float(self.gain.value()), offset_uv=float(self.offset.value()),
                      header_bytes=int(self.header.value()), offset_counts=float(self.offset_counts.value()),
                      groups=groups_of_size(n, min(self.group_size.value(), n)))
