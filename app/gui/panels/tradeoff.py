"""The detection trade-off on a recording with ground truth: for the shown channel group, the share
of true spikes missed against the false alarms per second, one point per threshold (0.25 σ apart),
beside the noise-only rate expected at each threshold; and where each true unit starts to be missed.

Clicking a point sets the threshold there; with the view focused, the arrow keys step it by 0.25 σ.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QEvent, Qt
from PySide6.QtWidgets import QHeaderView, QLabel, QTableWidget, QTableWidgetItem, QVBoxLayout

from rigside.core.synthetic.tradeoff import MISS_ONSET_FRACTION, STEP_SIGMA, TOLERANCE_MS, practice_tradeoff
from rigside.gui import palette
from rigside.gui.panels.base import Panel

STEP_KEYS = {Qt.Key.Key_Up: 1, Qt.Key.Key_Right: 1, Qt.Key.Key_Down: -1, Qt.Key.Key_Left: -1}
UNIT_COLUMNS = ("unit", "kind", "peak µV (raw)", "starts to be missed at", "missed now")


class TradeoffPanel(Panel):
    panel_id = "tradeoff"
    title = "Misses versus false alarms"

    def __init__(self, bench, runner, parent=None):
        super().__init__(bench, runner, parent)
        self.curve = None
        self.onsets = []
        self._group = None
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        self._build()
        bench.recording_changed.connect(self._clear)
        bench.events_changed.connect(self._request)
        bench.truth_changed.connect(self._request)
        bench.selection_changed.connect(self._on_selection)
        bench.thresholds_changed.connect(self._on_thresholds)

    def _build(self) -> None:
        self.plot_widget = pg.GraphicsLayoutWidget()
        self.plot_widget.setFocusPolicy(Qt.FocusPolicy.NoFocus)   # clicks focus the panel (arrow keys)
        self.plot = self.plot_widget.addPlot()
        self.plot.setMenuEnabled(False)
        self.plot.hideButtons()
        self.plot.setLogMode(x=True, y=False)
        palette.style_plot(self.plot, "false alarms per second (log)", "true spikes missed (%)")
        self.noise_line = self.plot.plot([], [], pen=palette.pen(palette.GREY, 1.5, dash=True))
        self.points = self.plot.plot([], [], pen=palette.pen(palette.BLUE, 1.5), symbol="o", symbolSize=7,
                                     symbolPen=palette.pen(palette.BLUE, 1), symbolBrush=pg.mkBrush(*palette.BLUE))
        self.points.sigPointsClicked.connect(self._on_click)
        self.current = self.plot.plot([], [], pen=None, symbol="d", symbolSize=16,
                                      symbolPen=palette.pen(palette.BLACK, 1.5),
                                      symbolBrush=pg.mkBrush(*palette.THRESHOLD))
        self.key = QLabel(palette.key([("━●", palette.BLUE, "detected (one point per 0.25 σ)"),
                                       ("◆", palette.THRESHOLD, "current threshold"),
                                       ("╍╍", palette.GREY, "if every false alarm were noise (Rice, sampled)")]))
        self.key.setWordWrap(True)
        self.units = QTableWidget(0, len(UNIT_COLUMNS))
        self.units.setHorizontalHeaderLabels(list(UNIT_COLUMNS))
        self.units.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
        self.units.verticalHeader().setVisible(False)
        self.units.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)
        self.units.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        self.note = QLabel("")
        self.note.setWordWrap(True)
        self.reading = QLabel("")
        self.reading.setWordWrap(True)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.key)
        lay.addWidget(self.reading)
        lay.addWidget(self.plot_widget, 3)
        lay.addWidget(self.units, 2)
        lay.addWidget(self.note)
        self._show_plot(False)

    def _show_plot(self, shown: bool) -> None:
        for w in (self.key, self.reading, self.plot_widget, self.units):
            w.setVisible(shown)

    # ---- data ---------------------------------------------------------------------------
    def _clear(self) -> None:
        self.curve, self.onsets, self._group = None, [], None
        for item in (self.points, self.noise_line, self.current):
            item.setData([], [])
        self.units.setRowCount(0)
        self._show_plot(False)
        self.note.setText("")

    def _on_selection(self) -> None:
        if self.bench.recording is not None and self.bench.group != self._group:
            self._request()

    def _request(self) -> None:
        b = self.bench
        if b.events is None or b.analysis.truth is None:
            self._clear()
            return
        if b.truth_hidden:
            self._show_plot(False)
            self.note.setText("Ground truth is hidden: guess where the units start to be missed and where "
                              "false alarms take over, then reveal it (Practice > Reveal ground truth).")
            return
        self._group = b.group
        self.runner.submit("tradeoff", "Scoring the trade-off", practice_tradeoff, b.events, b.analysis.truth,
                           b.group_channels, b.analysis.sos, on_done=self._on_result)

    def _on_result(self, result) -> None:
        if self.bench.truth_hidden or self.bench.events is None:
            return
        self.curve, self.onsets = result
        self._show_plot(True)
        c = self.curve
        self.points.setData(self._x(c.false_alarms_per_s), 100 * c.miss_fraction)
        self.noise_line.setData(self._x(c.expected_noise_per_s), 100 * c.miss_fraction)
        name = self.bench.recording.group_names[self.bench.group]
        self.plot.setTitle(f"{name}: {len(self.onsets)} true unit(s), match within {TOLERANCE_MS:g} ms",
                           color=palette.FOREGROUND, size="10pt")
        self.note.setText(f"Points with no false alarm sit at the left edge ({self._x_floor():.2g} /s: "
                          f"fewer than one in the recording). A unit starts to be missed where "
                          f"{MISS_ONSET_FRACTION:.0%} of its spikes fall below the threshold (Gaussian fitted to "
                          "its amplitudes above the floor, noise included; hover over \"no estimate\" for why). "
                          "Click a point to set the threshold; ↑/↓ step it by 0.25 σ.")
        self._on_thresholds(True)

    def _x_floor(self) -> float:
        return 0.5 / self.curve.duration_s

    def _x(self, rate: np.ndarray) -> np.ndarray:
        return np.maximum(rate, self._x_floor())

    def _on_thresholds(self, final: bool = True) -> None:
        c, b = self.curve, self.bench
        if c is None or b.events is None or not final:
            return
        k = float(b.thresholds_sigma[b.channel])
        i = c.nearest(k)
        x, y = self._x(c.false_alarms_per_s[i:i + 1]), 100 * c.miss_fraction[i:i + 1]
        self.current.setData(x, y)
        missed = f"{y[0]:.1f}% of true spikes missed" if np.isfinite(y[0]) else "no true spikes here"
        self.reading.setText(f"<b>{c.thresholds_sigma[i]:.2f} σ</b>: {missed}, {c.false_alarms_per_s[i]:.3g} false "
                             f"alarms/s (noise alone ≈ {c.expected_noise_per_s[i]:.3g}/s)")
        self._fill_units(k)

    def _fill_units(self, k: float) -> None:
        truth = self.bench.analysis.truth
        self.units.setRowCount(len(self.onsets))
        for r, o in enumerate(self.onsets):
            onset = f"{o.onset_sigma:.2f} σ" if not o.reason else "no estimate"
            missed = f"{100 * float(o.missed_at(k)):.1f}%" if not o.reason else ""
            cells = (str(o.unit), truth.unit_kind.get(o.unit, ""), f"{truth.unit_peak_uv.get(o.unit, np.nan):.0f}",
                     onset, missed)
            for col, text in enumerate(cells):
                item = QTableWidgetItem(text)
                if o.reason:
                    item.setToolTip(o.reason)
                self.units.setItem(r, col, item)

    # ---- choosing a threshold -----------------------------------------------------------
    def _on_click(self, item, points, *args) -> None:
        if self.curve is None or not len(points):
            return
        self.setFocus()
        self.set_threshold(float(self.curve.thresholds_sigma[points[0].index()]))

    def set_threshold(self, k: float) -> None:
        self.bench.set_threshold(round(k, 6), final=True, scale="sigma")

    def step(self, steps: int) -> None:
        b = self.bench
        if b.events is None:
            return
        self.set_threshold(float(b.thresholds_sigma[b.channel]) + STEP_SIGMA * steps)

    def event(self, e) -> bool:
        # the window's arrow-key shortcuts (scrolling) give way while this view has focus
        if e.type() == QEvent.Type.ShortcutOverride and e.key() in STEP_KEYS and not e.modifiers():
            e.accept()
            return True
        return super().event(e)

    def keyPressEvent(self, e) -> None:
        if e.key() in STEP_KEYS and not e.modifiers():
            self.step(STEP_KEYS[e.key()])
            e.accept()
            return
        super().keyPressEvent(e)
