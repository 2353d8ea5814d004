"""Stacked traces of the shown channels with events, noise bands and the threshold handle."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, QTimer
from PySide6.QtGui import QFontMetrics
from PySide6.QtWidgets import QCheckBox, QComboBox, QGraphicsRectItem, QHBoxLayout, QInputDialog, QLabel, QVBoxLayout

from rigside.core.signal.filtering import BandPass
from rigside.gui import palette
from rigside.gui.bindings import CheckBinding
from rigside.gui.channel_text import channel_list, lane_name, parse_channels
from rigside.gui.panels.base import Panel, highlight_sets, same_highlights
from rigside.gui.panels.event_marks import EventMarks
from rigside.gui.panels.spike_rows import SpikeRows
from rigside.gui.panels.trace_source import TraceSource
from rigside.gui.panels.trace_threshold import ThresholdHandle
from rigside.gui.trace_data import Block, step_for, visible_envelope

LANE_SIGMAS = 20.0        # lane height in noise sigmas of the filtered signal
AXIS_WIDTH = 56            # left axis (channel names) width in pixels, wider for long row labels
NICE = np.array([1, 2, 5, 10, 20, 50, 100, 200, 500, 1000, 2000, 5000, 10000], dtype=float)


class TracePanel(Panel):
    panel_id = "traces"
    title = "Traces"

    def __init__(self, bench, runner, parent=None):
        super().__init__(bench, runner, parent)
        self.gain = 1.0
        self.spacing = 100.0
        self.offsets = np.zeros(0)
        self.lane = np.zeros(0, dtype=np.int64)
        self.source = TraceSource(bench, runner, self.refresh)
        self._setting_range = False
        self._build()
        bench.recording_changed.connect(self._on_recording)
        bench.selection_changed.connect(self._on_selection)
        bench.events_changed.connect(self._on_events)
        bench.thresholds_changed.connect(self._on_thresholds)
        bench.scale_changed.connect(self.threshold.update_handle)
        bench.view_changed.connect(self._on_view)
        bench.show_raw_changed.connect(self._on_raw)
        bench.overview_changed.connect(self._on_overview)

    # ---- construction -----------------------------------------------------------------
    def _build(self) -> None:
        self.show_combo = QComboBox()
        self.show_combo.setToolTip("Channels to show: a channel group, all channels, or a chosen set")
        self.show_combo.activated.connect(self._on_show_choice)
        self.raw_box = QCheckBox("Raw (unfiltered)")
        self.raw_box.setToolTip("Show the unfiltered signal instead of the band-passed one (R)")
        CheckBinding(self.raw_box, lambda: self.bench.show_raw, self.bench.set_show_raw,
                     [self.bench.show_raw_changed])
        self.info = QLabel("")
        self.info.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        top = QHBoxLayout()
        top.addWidget(QLabel("Show:"))
        top.addWidget(self.show_combo)
        top.addWidget(self.raw_box)
        top.addStretch(1)
        top.addWidget(self.info)

        self.plot = pg.PlotWidget()
        pi = self.plot.getPlotItem()
        pi.setMouseEnabled(x=True, y=False)
        pi.setMenuEnabled(False)
        pi.hideButtons()
        palette.style_plot(pi, "time (s)", "")
        pi.showGrid(x=True, y=False, alpha=0.15)
        pi.getAxis("left").setWidth(AXIS_WIDTH)
        self.vb = pi.getViewBox()
        self.vb.setDefaultPadding(0.0)
        self.vb.disableAutoRange()
        self.bands: list[QGraphicsRectItem] = []
        self.curve = pg.PlotCurveItem(pen=palette.pen(palette.TRACE))
        self.selected_curve = pg.PlotCurveItem(pen=palette.pen(palette.TRACE_SELECTED), skipFiniteCheck=True)
        palette.painted_once(self.curve, self.selected_curve)
        self.marks = EventMarks()
        self.rows = SpikeRows(pi)
        self.scale_bar = pg.PlotCurveItem(pen=palette.pen(palette.BLACK, 3))
        self.scale_text = pg.TextItem("", color=palette.FOREGROUND, anchor=(1, 0.5), fill=(255, 255, 255, 220))
        pi.addItem(self.curve)
        pi.addItem(self.selected_curve)
        self.threshold = ThresholdHandle(self, pi)
        self.handle, self.threshold_lines = self.threshold.handle, self.threshold.lines
        for item in (*self.marks.items(), self.scale_bar):
            pi.addItem(item)
        pi.addItem(self.scale_text, ignoreBounds=True)
        self.vb.sigXRangeChanged.connect(self._on_range_changed)
        self.plot.scene().sigMouseClicked.connect(self._on_click)
        self._resize_timer = QTimer(self, singleShot=True, interval=50, timeout=self._on_resized)
        self.vb.sigResized.connect(self._resize_timer.start)

        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addLayout(top)
        lay.addWidget(self.plot, 1)

    # ---- model events -----------------------------------------------------------------
    def _on_recording(self) -> None:
        rec = self.bench.recording
        self.source.reset(BandPass(rec, self.bench.analysis.params.filter))
        self.show_combo.clear()
        for i, name in enumerate(rec.group_names):
            chans = rec.groups[i]
            self.show_combo.addItem(f"{name} (ch {channel_list(chans)})", ("group", i))
        self.show_combo.addItem(f"All channels ({rec.n_channels})", ("all", None))
        self.show_combo.addItem("Choose channels…", ("choose", None))
        self.vb.setLimits(xMin=0.0, xMax=rec.duration_s, minXRange=min(0.005, rec.duration_s))
        self.handle.setVisible(False)

    def _on_show_choice(self, index: int) -> None:
        kind, value = self.show_combo.itemData(index)
        rec = self.bench.recording
        if kind == "group":
            self.bench.show_group(value)
        elif kind == "all":
            self.bench.show_channels(range(rec.n_channels), "all channels")
        else:
            text, ok = QInputDialog.getText(self, "Choose channels", "Channels (e.g. 0-3, 8, 12):")
            if ok:
                try:
                    chans = parse_channels(text, rec.n_channels)
                except ValueError as exc:
                    self.window().show_error("Channels not understood", str(exc))
                    return
                self.bench.show_channels(chans, f"channels {channel_list(chans)}")

    def _on_selection(self) -> None:
        b = self.bench
        rec = b.recording
        shown = b.shown_channels
        self.lane = np.full(rec.n_channels, -1, dtype=np.int64)
        self.lane[shown] = np.arange(len(shown))
        # item data are Python tuples, which QComboBox.findData compares by identity
        choices = [self.show_combo.itemData(i) for i in range(self.show_combo.count())]
        if b.shown_label == rec.group_names[b.group] and ("group", b.group) in choices:
            self.show_combo.setCurrentIndex(choices.index(("group", b.group)))
        elif len(shown) == rec.n_channels:
            self.show_combo.setCurrentIndex(choices.index(("all", None)))
        self._layout_lanes()
        self._limit_span()
        self._on_view(*b.view)

    def _limit_span(self) -> None:
        """The widest view: the whole file when an overview exists, else what samples allow."""
        b = self.bench
        max_span = self.source.max_span_s()
        self.vb.setLimits(maxXRange=max_span)
        t0, t1 = b.view
        if t1 - t0 > max_span:
            b.set_view(t0, t0 + max_span)

    def _on_events(self) -> None:
        self._layout_lanes()
        self.refresh()

    def _on_thresholds(self, final: bool) -> None:
        self.threshold.draw_lines()
        self.threshold.update_handle()
        self._draw_markers()

    def _on_view(self, t0: float, t1: float) -> None:
        self._setting_range = True
        try:
            self.vb.setXRange(t0, t1, padding=0)
            # Apply the new range to the items now: left to the paint, the items' geometry
            # change would ask for a second paint of the whole view.
            self.vb.updateMatrix()
        finally:
            self._setting_range = False
        self.refresh()

    def _on_raw(self) -> None:
        self.source.reset()
        self._layout_lanes()
        self._limit_span()
        self.refresh()

    def _on_overview(self) -> None:
        if self.bench.recording is not None and len(self.offsets):
            self.source.reset()
            self._limit_span()
            self.refresh()

    def _on_range_changed(self, _vb, rng) -> None:
        if not self._setting_range and self.bench.recording is not None:
            self.bench.set_view(max(0.0, rng[0]), rng[1])

    # ---- lanes ------------------------------------------------------------------------
    def _layout_lanes(self) -> None:
        b = self.bench
        shown = b.shown_channels
        sigma = b.sigma_uv
        if b.show_raw:
            base = self._raw_spread()
        elif sigma is not None and np.any(sigma[shown] > 0):
            base = LANE_SIGMAS * float(np.median(sigma[shown][sigma[shown] > 0]))
        else:
            base = 100.0
        self.spacing = base / self.gain
        self.offsets = -np.arange(len(shown)) * self.spacing
        axis = self.plot.getPlotItem().getAxis("left")
        lo, hi = self.offsets[-1] - 0.6 * self.spacing, 0.6 * self.spacing
        band = self.rows.layout(hi, hi - lo, self.vb.height())
        self.vb.setYRange(lo, hi + band, padding=0)
        out = {} if b.events is None else b.events.excluded
        names = [(float(o), lane_name(b.recording, int(c)) + (f" · {out[int(c)]}, left out" if int(c) in out else ""))
                 for o, c in zip(self.offsets, shown)]
        font = axis.style["tickFont"] or axis.font()
        lane_px = self.vb.height() * self.spacing / max(1e-9, hi + band - lo)
        every = max(1, int(np.ceil(QFontMetrics(font).height() / max(1.0, lane_px))))   # labels that do not overlap
        axis.setTicks([names[::every] + self.rows.ticks(), []])
        wide = max([QFontMetrics(font).horizontalAdvance(n) for _, n in names] + [self.rows.label_width(font)])
        axis.setWidth(max(AXIS_WIDTH, wide + 12))
        self._draw_bands()
        self.threshold.draw_lines()
        self.threshold.update_handle()

    def _raw_spread(self) -> float:
        """Lane height for the raw signal: median over channels of the 0.5-99.5 % range of
        short stretches spread over the visible window (so slow drift counts too)."""
        rec = self.bench.recording
        a, z = self.visible_samples()
        n = min(z - a, int(0.05 * rec.rate_hz))
        if n < 2:
            return 100.0
        starts = np.linspace(a, z - n, 8).astype(np.int64)
        x = np.concatenate([rec.read(int(s), int(s) + n, self.bench.shown_channels) for s in starts])
        lo, hi = np.percentile(x, [0.5, 99.5], axis=0)
        spread = float(np.median(hi - lo))
        return 1.1 * spread if spread > 0 else 100.0

    def _draw_bands(self) -> None:
        """A light band of plus/minus one noise sigma around each trace's baseline."""
        pi = self.plot.getPlotItem()
        for item in self.bands:
            pi.removeItem(item)
        self.bands = []
        sigma = self.bench.sigma_uv
        if sigma is None or self.bench.show_raw:
            return
        duration = self.bench.recording.duration_s
        brush = pg.mkBrush(*palette.NOISE_BAND)
        for off, c in zip(self.offsets, self.bench.shown_channels):
            s = float(sigma[c])
            item = QGraphicsRectItem(0.0, off - s, duration, 2 * s)
            item.setPen(pg.mkPen(None))
            item.setBrush(brush)
            item.setZValue(-10)
            pi.addItem(item, ignoreBounds=True)
            self.bands.append(item)

    def scale_traces(self, factor: float) -> None:
        """Make traces taller (factor > 1) or shorter."""
        self.gain = float(np.clip(self.gain * factor, 0.1, 20.0))
        if self.bench.recording is not None:
            self._layout_lanes()
            self.refresh()

    @property
    def block(self) -> Block | None:
        """What the traces are drawn from now (samples or overview bins)."""
        return self.source.block

    def handle_y(self, k_sigma: float) -> float:
        """Where the handle sits for ``k_sigma`` on the selected channel (for tests and keys)."""
        return self.threshold.handle_y(k_sigma)

    def _on_click(self, event) -> None:
        if self.bench.recording is None or not len(self.offsets):
            return
        pos = event.scenePos()
        if not self.vb.sceneBoundingRect().contains(pos):
            return
        y = self.vb.mapSceneToView(pos).y()
        if y > self.rows.base:      # the band of spike rows, above the lanes
            return
        lane = int(np.clip(round(-y / self.spacing), 0, len(self.offsets) - 1))
        self.bench.select_channel(int(self.bench.shown_channels[lane]))

    # ---- drawing ----------------------------------------------------------------------
    def visible_samples(self) -> tuple[int, int]:
        rec = self.bench.recording
        t0, t1 = self.bench.view
        a = int(np.clip(np.floor(t0 * rec.rate_hz), 0, rec.n_samples))
        return a, int(np.clip(np.ceil(t1 * rec.rate_hz), a + 1, rec.n_samples))

    def refresh(self) -> None:
        """Draw the visible traces, fetching what they are drawn from if needed (see :class:`TraceSource`).

        Zoomed out, the filtered traces come from the overview at once; short spans read
        samples (small slices at once, larger ones in a background job while the view draws
        what it has, with the next stretch fetched ahead near the edge).
        """
        b = self.bench
        rec = b.recording
        if rec is None or not len(self.offsets) or self.source.unshowable:
            return
        a, z = self.visible_samples()
        step = self._step(a, z)
        self.source.prepare(a, z, step)
        self._draw_traces(a, z, step)
        self.threshold.draw_lines()
        self._draw_markers()
        self.rows.draw(*b.view)
        self._draw_scale_bar()
        self.info.setText(f"{b.shown_label} · selected ch {b.channel} · "
                          f"{'raw' if b.show_raw else 'filtered'} · {b.view[1] - b.view[0]:.3g} s shown")

    def _step(self, a: int, z: int) -> int:
        return step_for(z - a, max(200, int(self.vb.width())))

    def _draw_traces(self, a: int, z: int, step: int) -> None:
        blk = self.source.block
        b = self.bench
        if blk is None or blk.channels != tuple(int(c) for c in b.shown_channels) or blk.raw != b.show_raw:
            self.curve.setData([], [])
            self.selected_curve.setData([], [])
            return
        pos, values = visible_envelope(blk, a, z, step)
        n, nc = values.shape
        if n == 0:
            return
        t = pos / b.recording.rate_hz
        shown = values - (np.median(values, axis=0) if b.show_raw else 0.0) + self.offsets[None, :]
        # One polyline for all lanes, a gap point between lanes: this path is built about
        # twice as fast as one with an explicit connection array (bench/bench_overview.py).
        y = np.full((nc, n + 1), np.nan, dtype=np.float32)
        y[:, :n] = shown.T
        x = np.append(t, np.nan)
        self.curve.setData(np.tile(x, nc), y.ravel(), connect="finite")
        lane = int(self.lane[b.channel])
        if lane >= 0:
            self.selected_curve.setData(t, shown[:, lane])

    def clear_traces(self) -> None:
        """Draw no samples (the recording cannot be shown) until another recording opens."""
        self.source.reset()
        self.source.unshowable = True
        self.curve.setData([], [])
        self.selected_curve.setData([], [])

    def _draw_markers(self) -> None:
        a, z = self.visible_samples() if self.bench.recording is not None else (0, 0)
        self.marks.draw(self.bench, self.offsets, self.lane, self.spacing, a, z, max(200, int(self.vb.width())))

    def highlight(self, rows_and_colours) -> None:
        """Mark these events (rows of the event table) in one colour per set (selected units)."""
        sets = highlight_sets(rows_and_colours)
        if same_highlights(sets, self.marks.highlights):
            return
        self.marks.highlights = sets
        self._draw_markers()

    def set_spike_rows(self, key: str, rows) -> None:
        """Draw spike trains in a band above the traces, replacing those set before under ``key``.

        Each row is ``(label, times_s, flags or None, colour, symbol)``: a tick per spike in
        ``colour``, and ``symbol`` (a pyqtgraph symbol name) with a guide line down through the
        traces for the spikes where ``flags`` is True. Rows of different keys stack top-down.
        """
        self._rows_changed(self.rows.set(key, rows))

    def clear_spike_rows(self, key: str) -> None:
        """Remove the rows set under ``key``."""
        self._rows_changed(self.rows.clear(key))

    def _rows_changed(self, relayout: bool) -> None:
        if self.bench.recording is not None and len(self.offsets):
            if relayout:
                self._layout_lanes()
            self.rows.draw(*self.bench.view)

    def _on_resized(self) -> None:
        if self.bench.recording is not None and len(self.offsets):
            self._layout_lanes()       # the rows keep their height on screen, lane labels their spacing
        self.refresh()

    def marker_times(self) -> np.ndarray:
        """Times (s) of the event markers drawn now (one per marked event unless dense)."""
        return self.marks.times()

    def _draw_scale_bar(self) -> None:
        t0, t1 = self.bench.view
        length = float(NICE[np.searchsorted(NICE, 0.5 * self.spacing) - 1]) if self.spacing > 2 else 1.0
        x = t1 - 0.015 * (t1 - t0)
        top = 0.3 * self.spacing
        self.scale_bar.setData([x, x], [top, top - length])
        self.scale_text.setText(f"{length:g} µV")
        self.scale_text.setPos(x - 0.005 * (t1 - t0), top - length / 2)
