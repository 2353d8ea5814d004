"""Events per second versus threshold, beside the expected noise-only rate; with ground
truth, hits, misses and false alarms versus threshold."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QLabel, QVBoxLayout

from rigside.core.signal.rice import rice_rate
from rigside.core.synthetic.truth import score_curve
from rigside.gui import palette
from rigside.gui.panels.base import Panel

GRID_POINTS = 240


class CountCurvePanel(Panel):
    panel_id = "count_curve"
    title = "Count versus threshold"

    def __init__(self, bench, runner, parent=None):
        super().__init__(bench, runner, parent)
        self._placing = False
        self.scores = None
        self.curve: dict | None = None
        """The numbers of the curve drawn last (see :meth:`plot_table`)."""
        self._build()
        bench.events_changed.connect(self._redraw)
        bench.selection_changed.connect(self._on_selection)
        bench.scale_changed.connect(self._redraw)
        bench.thresholds_changed.connect(self._on_thresholds)
        bench.truth_changed.connect(self._request_scores)
        bench.recording_changed.connect(self._on_recording)

    def _build(self) -> None:
        self.layout_widget = pg.GraphicsLayoutWidget()
        self.rate_plot = self.layout_widget.addPlot(row=0, col=0)
        self.rate_plot.setLogMode(x=False, y=True)
        self.rate_plot.setMenuEnabled(False)
        self.rate_plot.hideButtons()
        self.observed = self.rate_plot.plot([], [], pen=palette.pen(palette.BLUE, 2.5), name="detected events")
        self.sampled = self.rate_plot.plot([], [], pen=palette.pen(palette.BLACK, 1.5, dash=True),
                                           name="noise only (sampled data)")
        self.continuous = self.rate_plot.plot([], [], pen=palette.pen(palette.GREY, 1.5, dot=True),
                                              name="noise only (Rice, continuous)")
        palette.painted_once(self.observed.curve, self.sampled.curve, self.continuous.curve)
        self.line = pg.InfiniteLine(angle=90, movable=True, pen=palette.pen(palette.THRESHOLD, 2.5),
                                    hoverPen=palette.pen(palette.VERMILLION, 3.5), label="",
                                    labelOpts={"position": 0.92, "color": palette.FOREGROUND,
                                               "fill": (255, 255, 255, 220)})
        self.rate_plot.addItem(self.line, ignoreBounds=True)
        self.line.sigPositionChanged.connect(lambda *_: self._on_line(False))
        self.line.sigPositionChangeFinished.connect(lambda *_: self._on_line(True))
        self.truth_plot = self.layout_widget.addPlot(row=1, col=0)
        self.truth_plot.setMenuEnabled(False)
        self.truth_plot.hideButtons()
        palette.style_plot(self.truth_plot, "threshold (× noise σ)", "true spikes / events")
        self.hits = self.truth_plot.plot([], [], pen=palette.pen(palette.HITS, 2.5), name="hits")
        self.misses = self.truth_plot.plot([], [], pen=palette.pen(palette.MISSES, 2.5, dash=True),
                                           name="misses")
        self.false_alarms = self.truth_plot.plot([], [], pen=palette.pen(palette.FALSE_ALARMS, 2.5, dot=True),
                                                 name="false alarms")
        self.truth_line = pg.InfiniteLine(angle=90, movable=False, pen=palette.pen(palette.THRESHOLD, 2))
        self.truth_plot.addItem(self.truth_line, ignoreBounds=True)
        self.truth_plot.setVisible(False)
        self.note = QLabel("")
        self.note.setWordWrap(True)
        self.key = QLabel(palette.key([("━━", palette.BLUE, "detected events"),
                                       ("╍╍", palette.BLACK, "noise only, sampled data"),
                                       ("┈┈", palette.GREY, "noise only, Rice (continuous)")]))
        self.truth_key = QLabel(palette.key([("━━", palette.HITS, "hits"), ("╍╍", palette.MISSES, "misses"),
                                             ("┈┈", palette.FALSE_ALARMS, "false alarms")]))
        self.truth_key.setVisible(False)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.key)
        lay.addWidget(self.layout_widget, 1)
        lay.addWidget(self.truth_key)
        lay.addWidget(self.note)

    # ---- data -----------------------------------------------------------------------------
    def _grid(self, channel: int) -> np.ndarray:
        ev = self.bench.events
        amps = ev.amplitude_sigma[(ev.channel == channel) & ~ev.artefact]
        top = float(np.clip(np.percentile(amps, 99.5) if len(amps) else 10.0, ev.floor_sigma + 3.0, 40.0))
        return np.linspace(ev.floor_sigma, top, GRID_POINTS)

    def _x(self, k: np.ndarray) -> np.ndarray:
        b = self.bench
        return k if b.scale == "sigma" else k * float(b.sigma_uv[b.channel])

    def plot_key(self, view) -> str:
        """The colour key of the curves (rich text), for saved pictures."""
        keys = [self.key.text()] + ([self.truth_key.text()] if self.truth_plot.isVisible() else [])
        return "<br>".join(keys)

    def plot_table(self, view) -> dict | None:
        """The count-versus-threshold curve drawn last, as a described table (None before detection)."""
        c = self.curve
        if c is None or view is not self.layout_widget:
            return None
        meanings = {"threshold_sigma": "threshold in multiples of the channel's robust noise sigma",
                    "threshold_uv": "the same threshold in microvolts [uV]",
                    "events_per_s": "detected events on the channel at or above the threshold, per second "
                                    "of recording [1/s]",
                    "noise_sampled_per_s": "expected crossings of noise alone in the sampled, filtered data [1/s]",
                    "noise_rice_per_s": "expected crossings of noise alone, Rice's formula for the continuous "
                                        "filtered signal [1/s]"}
        return {"title": [f"rigside count versus threshold, channel {c['channel']}, "
                          f"{self.bench.events.duration_s:g} s of recording"],
                "meanings": meanings, "table": {k: c[k] for k in meanings}}

    def _on_recording(self) -> None:
        self.scores = None
        self.curve = None
        for item in (self.observed, self.sampled, self.continuous, self.hits, self.misses, self.false_alarms):
            item.setData([], [])
        self.truth_plot.setVisible(False)
        self.truth_key.setVisible(False)
        self.note.setText("")

    def _on_selection(self) -> None:
        self._redraw()
        self._request_scores()

    def _redraw(self) -> None:
        b = self.bench
        ev = b.events
        if ev is None:
            return
        c = b.channel
        k = self._grid(c)
        dur = ev.duration_s
        rate = ev.count_curve(c, k) / dur
        x = self._x(k)
        self.observed.setData(x, np.where(rate > 0, rate, np.nan), connect="finite")
        noise = b.noise_rates(k)
        self.sampled.setData(x, noise)
        factor = 2.0 if ev.polarity == "both" else 1.0
        cont = factor * rice_rate(b.analysis.sos, ev.rate_hz, k)
        self.continuous.setData(x, cont)
        self.curve = {"channel": c, "threshold_sigma": k, "threshold_uv": k * float(b.sigma_uv[c]),
                      "events_per_s": rate, "noise_sampled_per_s": noise, "noise_rice_per_s": cont}
        lowest = 0.5 / dur
        highest = max(float(np.nanmax(rate)) if np.any(rate > 0) else 1.0, float(noise[0]))
        self.rate_plot.setYRange(np.log10(lowest), np.log10(highest * 2), padding=0)
        self.rate_plot.setXRange(x[0], x[-1], padding=0.02)
        scale = "× noise σ" if b.scale == "sigma" else "µV"
        palette.style_plot(self.rate_plot, f"threshold on ch {c} ({scale})", "events / s (log)")
        self.note.setText(f"ch {c}: where the detected curve meets the dashed one, noise alone would "
                          "give as many crossings (Gaussian noise through this filter assumed). Each event "
                          "counts once, on the group channel where it peaks.")
        self._on_thresholds(True)
        self._draw_scores()

    def _on_thresholds(self, final: bool = True) -> None:
        b = self.bench
        if b.events is None:
            return
        k = float(b.thresholds_sigma[b.channel])
        dur = b.events.duration_s
        n = int(b.events.count_curve(b.channel, np.array([k]))[0])
        noise = float(b.noise_rates(np.array([k]))[0])
        self.line.label.format = f"{k:.2f} σ: {n / dur:.2f} /s (noise ≈ {noise:.2g} /s)"
        self._placing = True
        try:
            if not self.line.moving:
                self.line.setValue(float(self._x(np.array([k]))[0]))
        finally:
            self._placing = False
        self.line.label.valueChanged()
        if self.truth_plot.isVisible():
            self.truth_line.setValue(k)

    def _on_line(self, final: bool) -> None:
        b = self.bench
        if self._placing or b.events is None:
            return
        value = float(self.line.value())
        b.set_threshold(value, final=final)

    # ---- ground truth ---------------------------------------------------------------------
    def _request_scores(self) -> None:
        b = self.bench
        truth, ev = b.shown_truth, b.events
        if truth is None or ev is None:
            self.truth_plot.setVisible(False)
            self.truth_key.setVisible(False)
            return
        k = np.linspace(ev.floor_sigma, ev.floor_sigma + 9.0, 46)
        chans = b.group_channels
        self.runner.submit("scores", "Scoring against ground truth", _score, ev, truth, k, chans,
                           on_done=self._on_scores)

    def _on_scores(self, scores) -> None:
        self.scores = scores
        self._draw_scores()

    def _draw_scores(self) -> None:
        s = self.scores
        if s is None or self.bench.shown_truth is None:
            return
        self.truth_plot.setVisible(True)
        self.truth_key.setVisible(True)
        self.truth_line.setValue(float(self.bench.thresholds_sigma[self.bench.channel]))
        self.hits.setData(s.thresholds_sigma, s.hits)
        self.misses.setData(s.thresholds_sigma, s.misses)
        self.false_alarms.setData(s.thresholds_sigma, s.false_alarms)
        name = self.bench.recording.group_names[int(self.bench.recording.channel_group[self.bench.channel])]
        self.truth_plot.setTitle(f"Ground truth, {name} (match within 0.5 ms)", color=palette.FOREGROUND,
                                 size="10pt")


def _score(events, truth, thresholds, channels, progress=None, cancel=None):
    return score_curve(events, truth, thresholds, tolerance_ms=0.5, channels=channels)
