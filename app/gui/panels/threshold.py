"""Threshold controls and the per-channel counts, rates and expected noise-only rates."""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import QAbstractTableModel, QModelIndex, QSignalBlocker, Qt, QTimer
from PySide6.QtGui import QColor, QFont
from PySide6.QtWidgets import (
    QAbstractItemView,
    QComboBox,
    QDoubleSpinBox,
    QFormLayout,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QPushButton,
    QTableView,
    QVBoxLayout,
)

from rigside.gui.bindings import ComboBinding, SpinBinding
from rigside.gui.panels.base import Panel
from rigside.gui.steady_label import SteadyLabel

TABLE_INTERVAL_MS = 50
COLUMNS = ("ch", "group", "σ (µV)", "thr (σ)", "thr (µV)", "events", "events/s", "noise/s", "flag")
COLUMN_TIPS = ("channel", "channel group", "robust noise sigma of the filtered signal (µV)",
               "threshold in multiples of the channel's noise sigma", "threshold in microvolts",
               "events at the threshold (artefacts excluded)", "events per second",
               "expected noise-only crossings per second at the threshold (sampled-data Rice form, "
               "Gaussian noise assumed)", "bad-channel flag (dead, saturated, noisy)")


_DISPLAY = int(Qt.ItemDataRole.DisplayRole)
_ALIGN = int(Qt.ItemDataRole.TextAlignmentRole)
_FONT = int(Qt.ItemDataRole.FontRole)
_BACKGROUND = int(Qt.ItemDataRole.BackgroundRole)
_ROLES_USED = frozenset((_DISPLAY, _ALIGN, _FONT, _BACKGROUND))
_RIGHT = int(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)


class ChannelTable(QAbstractTableModel):
    """One row per channel; numbers refreshed in place on every threshold change."""

    def __init__(self, bench, parent=None):
        super().__init__(parent)
        self.bench = bench
        self.counts = np.zeros(0, dtype=np.int64)
        self.noise_rate = np.zeros(0)
        self._bold = QFont()
        self._bold.setBold(True)
        self._shown = QColor(232, 242, 250)
        self._shown_from: np.ndarray | None = None
        self._shown_channels: frozenset[int] = frozenset()

    def _shown_set(self) -> frozenset[int]:
        """The shown channels as a set, remade whenever the workbench holds a new array of them."""
        shown = self.bench.shown_channels
        if shown is not self._shown_from:
            self._shown_from, self._shown_channels = shown, frozenset(np.asarray(shown).tolist())
        return self._shown_channels

    def rowCount(self, parent=QModelIndex()) -> int:
        rec = self.bench.recording
        return 0 if parent.isValid() or rec is None else rec.n_channels

    def columnCount(self, parent=QModelIndex()) -> int:
        return len(COLUMNS)

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):
        if orientation == Qt.Orientation.Horizontal and role == Qt.ItemDataRole.DisplayRole:
            return COLUMNS[section]
        if orientation == Qt.Orientation.Horizontal and role == Qt.ItemDataRole.ToolTipRole:
            return COLUMN_TIPS[section]
        return None

    def data(self, index, role=_DISPLAY):
        # called for every visible cell and role on each repaint: roles compared as plain ints
        role = int(role)
        if role not in _ROLES_USED:
            return None
        b = self.bench
        c, col = index.row(), index.column()
        if role == _ALIGN:
            return _RIGHT if col < 8 else None
        if role == _FONT:
            return self._bold if c == b.channel else None
        if role == _BACKGROUND:
            return self._shown if c in self._shown_set() else None
        rec = b.recording
        sigma = b.sigma_uv
        k = float(b.thresholds_sigma[c])
        if col == 0:
            return str(c)
        if col == 1:
            return rec.group_names[int(rec.channel_group[c])]
        if sigma is None:
            return "…" if col < 8 else ""
        if col == 2:
            return f"{sigma[c]:.2f}"
        if col == 3:
            return f"{k:.2f}"
        if col == 4:
            return f"{k * sigma[c]:.1f}"
        if col == 5:
            return "" if c >= len(self.counts) else f"{int(self.counts[c]):,}"
        if col == 6:
            return "" if c >= len(self.counts) else f"{self.counts[c] / rec.duration_s:.2f}"
        if col == 7:
            return "" if c >= len(self.noise_rate) else f"{self.noise_rate[c]:.2g}"
        noise = b.analysis.noise
        return "" if noise is None else noise.bad.get(c, "")

    def refresh(self, counts: np.ndarray | None, noise_rate: np.ndarray) -> None:
        self.counts = np.zeros(0, dtype=np.int64) if counts is None else counts
        self.noise_rate = noise_rate
        if self.rowCount():
            self.dataChanged.emit(self.index(0, 2), self.index(self.rowCount() - 1, len(COLUMNS) - 1),
                                  [Qt.ItemDataRole.DisplayRole])

    def reset(self) -> None:
        self.beginResetModel()
        self.counts = np.zeros(0, dtype=np.int64)
        self.endResetModel()


class ThresholdPanel(Panel):
    panel_id = "threshold"
    title = "Threshold and counts"

    def __init__(self, bench, runner, parent=None):
        super().__init__(bench, runner, parent)
        self._build()
        bench.recording_changed.connect(self._on_recording)
        bench.events_changed.connect(self._on_events)
        bench.thresholds_changed.connect(self._on_thresholds)
        bench.selection_changed.connect(self._on_thresholds)
        bench.scale_changed.connect(self._on_scale)

    def _build(self) -> None:
        b = self.bench
        self._table_timer = QTimer(self, singleShot=True, interval=TABLE_INTERVAL_MS, timeout=self._refresh_table)
        self.value = QDoubleSpinBox()
        self.value.setKeyboardTracking(False)
        self.value.setDecimals(2)
        self.value.setToolTip("Detection threshold of the selected channel (Ctrl+Up / Ctrl+Down)")
        self.scale = QComboBox()
        self.scale.addItem("× noise σ", "sigma")
        self.scale.addItem("µV", "uv")
        self.scale.setToolTip("Read and show the threshold as multiples of the channel's noise "
                             "sigma or in microvolts (U)")
        self.scope = QComboBox()
        self.scope.addItem("all channels", "all")
        self.scope.addItem("selected channel only", "channel")
        self.scope.setToolTip("Apply a new threshold to every channel, only to the selected one, or (probes) to "
                              "the selected site and the sites within the neighbourhood radius of it")
        SpinBinding(self.value, b.threshold_value, lambda v: b.set_threshold(v, final=True),
                    [b.thresholds_changed, b.scale_changed, b.selection_changed, b.events_changed])
        ComboBinding(self.scale, lambda: b.scale, b.set_scale, [b.scale_changed])
        ComboBinding(self.scope, lambda: b.scope, b.set_scope, [b.scale_changed])
        self.redetect = QPushButton("Detect again below the floor")
        self.redetect.setToolTip("The threshold is below the lowest stored event amplitude: "
                                 "detect again down to it")
        self.redetect.setVisible(False)
        self.redetect.clicked.connect(lambda: self.window().start_detection())
        self.summary_box = SteadyLabel("Open a recording to see counts.")   # new text on every move of a drag
        self.summary = self.summary_box.label
        self.summary.setTextFormat(Qt.TextFormat.RichText)
        self.floor_note = QLabel("")
        self.floor_note.setWordWrap(True)
        self.floor_note.setStyleSheet("color: #555;")
        form = QFormLayout()
        row = QHBoxLayout()
        row.addWidget(self.value, 1)
        row.addWidget(self.scale)
        form.addRow("Threshold:", row)
        form.addRow("Applies to:", self.scope)
        self.table_model = ChannelTable(b, self)
        self.table = QTableView()
        self.table.setModel(self.table_model)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.table.verticalHeader().setVisible(False)
        self.table.verticalHeader().setDefaultSectionSize(20)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Interactive)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.table.clicked.connect(lambda idx: b.select_channel(idx.row()))
        lay = QVBoxLayout(self)
        lay.setContentsMargins(4, 4, 4, 4)
        lay.addLayout(form)
        lay.addWidget(self.summary_box)
        lay.addWidget(self.redetect)
        lay.addWidget(self.floor_note)
        lay.addWidget(self.table, 1)

    def _on_recording(self) -> None:
        self.table_model.reset()
        probe = self.bench.recording.positions is not None
        at = self.scope.findData("neighbourhood")
        if probe and at < 0:
            self.scope.addItem("selected site's neighbourhood", "neighbourhood")
        elif not probe and at >= 0:
            if self.bench.scope == "neighbourhood":
                self.bench.set_scope("channel")
            self.scope.removeItem(at)
        self._on_scale()
        self.summary.setTextFormat(Qt.TextFormat.RichText)
        self.summary.setText("Measuring noise and detecting events…")

    def show_state(self, text: str) -> None:
        """Plain text in place of the counts (no detection: failed, cancelled)."""
        self.summary.setTextFormat(Qt.TextFormat.PlainText)
        self.summary.setText(text)

    def _on_scale(self) -> None:
        uv = self.bench.scale == "uv"
        with QSignalBlocker(self.value):
            self.value.setRange(0.1, 100000.0 if uv else 100.0)
            self.value.setSingleStep(1.0 if uv else 0.1)
            self.value.setDecimals(1 if uv else 2)
            self.value.setSuffix(" µV" if uv else " σ")
            value = self.bench.threshold_value()
            if np.isfinite(value):
                self.value.setValue(value)

    def _on_events(self) -> None:
        ev = self.bench.events
        self.floor_note.setText(f"Stored events reach down to {ev.floor_sigma:.2f} σ: any threshold above "
                                "that is a look-up. Noise-only rate: expected crossings per second of "
                                "filtered Gaussian noise at the threshold (sampled-data form of "
                                "Rice's formula).")
        self._on_thresholds()
        self.table.resizeColumnsToContents()
        rate_width = self.fontMetrics().horizontalAdvance("0.00088") + 16
        self.table.setColumnWidth(7, max(self.table.columnWidth(7), rate_width))

    def _on_thresholds(self, final: bool = True) -> None:
        """The summary follows every move; during a drag the table is redrawn at most every
        TABLE_INTERVAL_MS (repainting every cell costs a few ms), and at once on release."""
        b = self.bench
        if b.recording is None:
            return
        counts = b.counts()
        if final:
            self._table_timer.stop()
            self._refresh_table()
        elif not self._table_timer.isActive():
            self._table_timer.start()
        self.redetect.setVisible(b.below_floor())
        self.summary.setTextFormat(Qt.TextFormat.RichText)
        self.summary.setText(self.summary_text(counts))

    def _refresh_table(self) -> None:
        b = self.bench
        if b.recording is None:
            return
        noise_rate = b.noise_rates(b.thresholds_sigma) if b.events is not None else np.zeros(0)
        self.table_model.refresh(b.counts(), noise_rate)

    def summary_text(self, counts: np.ndarray | None) -> str:
        b = self.bench
        rec = b.recording
        if counts is None:
            return "Measuring noise and detecting events…"
        dur = rec.duration_s
        c = b.channel
        grp = b.group_channels
        shown = b.shown_channels
        n_c, n_g, n_s = int(counts[c]), int(counts[grp].sum()), int(counts[shown].sum())
        k = float(b.thresholds_sigma[c])
        uv = k * float(b.sigma_uv[c])
        name = rec.group_names[int(rec.channel_group[c])]
        note = " <b>(below the stored floor: counts are incomplete)</b>" if b.below_floor() else ""
        near = ""
        if rec.positions is not None:
            sites = b.neighbourhood()
            n_n = int(counts[sites].sum())
            near = (f"<br>its neighbourhood ({len(sites)} sites within {b.analysis.params.probe.radius_um:g} µm): "
                    f"{n_n:,} events, {n_n / dur:.2f} /s")
        return (f"<b>ch {c}</b> at {k:.2f} σ ({uv:.1f} µV): <b>{n_c:,}</b> events, "
                f"{n_c / dur:.2f} /s{near}<br>{name}: {n_g:,} events, {n_g / dur:.2f} /s · "
                f"shown channels: {n_s:,} events, {n_s / dur:.2f} /s{note}")
