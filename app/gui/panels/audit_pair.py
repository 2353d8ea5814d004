"""One imported unit beside its closest fresh unit: waveforms per channel, ISI histograms,
amplitude over time, and (through :func:`trace_rows`) both spike rasters on the trace view.

Every plot draws the two sides the same way, so a glance tells them apart without relying on
hue: the imported unit in blue (solid lines, filled dots), the fresh unit in orange (dashed
lines, rings); spikes that only one side holds get their own symbol (a cross: imported only,
a possible false positive; a triangle: fresh only, a possible miss). On the trace view each
side has a row of ticks, one per shared spike, with those symbols for the spikes it alone holds.
"""

from __future__ import annotations

import html

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QGridLayout, QHBoxLayout, QLabel, QPushButton, QVBoxLayout, QWidget

from rigside.core.audit.views import PairView, UnitView
from rigside.gui import palette
from rigside.gui.panels.unit_view_base import step_curve

IMPORTED, FRESH = palette.BLUE, palette.ORANGE
MAX_BLOCKS = 8          # channels drawn side by side at most (those with the largest waveforms)
GAP_FRACTION = 0.25     # gap between channel blocks, as a share of the snippet length
TICK_MS = 0.5           # tick spacing inside each channel block
SIDES = ("imported", "fresh")
TRACE_KEY = "audit"     # the trace view's spike rows set by the audit
# (symbol, size, filled) of a side's spikes that the other side shares, and of those it alone holds
SYMBOLS = {("imported", True): ("o", 5, True), ("imported", False): ("x", 10, True),
           ("fresh", True): ("o", 9, False), ("fresh", False): ("t", 10, True)}


def colour_of(side: str):
    return IMPORTED if side == "imported" else FRESH


def scatter(side: str, shared: bool) -> pg.ScatterPlotItem:
    symbol, size, filled = SYMBOLS[(side, shared)]
    c = colour_of(side)
    return pg.ScatterPlotItem(symbol=symbol, size=size, pen=palette.pen(c, 1.5),
                              brush=pg.mkBrush(*c, 200) if filled else pg.mkBrush(None))


def key_text(pair: PairView | None) -> str:
    """The symbol key, naming the two units."""
    imp = f"imported unit {html.escape(shown_unit(pair, 'imported'))}" if pair else "imported unit"
    fresh = f"fresh unit {pair.fresh.unit}" if pair and pair.fresh else "fresh unit"
    entries = [("● ——", IMPORTED, f"{imp}, spike shared"), ("✕", IMPORTED, "imported only (possible false positive)"),
               ("○ - -", FRESH, f"{fresh}, spike shared"), ("▼", FRESH, "fresh only (possible miss)")]
    return palette.key(entries) + " &nbsp; (trace view: a tick per shared spike)"


def shown_unit(pair: PairView, name: str) -> str:
    """A side's unit as shown: the imported unit as its file gives it (a name, for named units)."""
    return str(pair.row["unit"]) if name == "imported" else str(pair.fresh.unit)


def sides_of(pair: PairView | None) -> list[tuple[str, UnitView]]:
    """The pair's sides that exist, as (name, side)."""
    if pair is None:
        return []
    return [(name, side) for name, side in (("imported", pair.imported), ("fresh", pair.fresh)) if side is not None]


def trace_rows(pair: PairView | None) -> list[tuple]:
    """Rows for :meth:`app.panels.traces.TracePanel.set_spike_rows`: each side's spikes, those
    the other side lacks flagged and drawn with the side's symbol for them."""
    return [(f"{name} {shown_unit(pair, name)}", side.times_s, ~side.shared, colour_of(name), SYMBOLS[(name, False)][0])
            for name, side in sides_of(pair)]


def shown_channels(pair: PairView) -> np.ndarray:
    """Channels drawn as blocks: both sides' channels, at most :data:`MAX_BLOCKS` (the largest
    mean waveforms of either side), in recording order."""
    sides = [s for s in (pair.imported, pair.fresh) if s is not None and len(s.waveforms)]
    chans = np.unique(np.concatenate([s.channels for s in sides])) if sides else np.zeros(0, dtype=np.int64)
    if len(chans) <= MAX_BLOCKS:
        return chans
    size = np.zeros(len(chans))
    for s in sides:
        peak = np.abs(s.waveforms.mean(axis=0)).max(axis=0)
        size[np.searchsorted(chans, s.channels)] = np.maximum(size[np.searchsorted(chans, s.channels)], peak)
    return np.sort(chans[np.argsort(-size, kind="stable")[:MAX_BLOCKS]])


class AuditPairPlots(QWidget):
    """The three pair plots. After :meth:`show_pair`, ``wave_curves``, ``isi_curves`` and
    ``amp_items`` (keyed by side, and by shared for the scatters) hold exactly what is drawn."""

    def __init__(self, bench, parent: QWidget | None = None):
        super().__init__(parent)
        self.bench = bench
        self.pair: PairView | None = None
        self.group: int | None = None
        self.header = QLabel("")
        self.header.setWordWrap(True)
        self.header.setTextFormat(Qt.TextFormat.RichText)
        self.key = QLabel(key_text(None))
        self.waveforms = palette.make_plot("time from spike (ms), one block per channel", "filtered signal (µV)")
        self.isi = palette.make_plot("interval between consecutive spikes (ms); grey: refractory window",
                                     "intervals (count)")
        self.amplitude = palette.make_plot("time in the recording (s)", "amplitude (µV)")
        self.refractory = pg.LinearRegionItem(movable=False, brush=pg.mkBrush(*palette.GREY, 50),
                                              pen=palette.pen(palette.GREY))
        self.refractory.setZValue(-10)
        self.wave_curves: dict[str, pg.PlotCurveItem] = {}
        self.wave_channels = np.zeros(0, dtype=np.int64)
        self.isi_curves: dict[str, pg.PlotCurveItem] = {}
        self.amp_items = {k: scatter(*k) for k in SYMBOLS}
        for k in SYMBOLS:
            self.amplitude.addItem(self.amp_items[k])
        self.note = QLabel("")
        self.note.setWordWrap(True)

        self.show_button = QPushButton("Show its channels on the trace")
        self.show_button.setToolTip("Show the imported unit's channel group in the trace view")
        self.show_button.clicked.connect(self.show_on_trace)
        self.previous_button = QPushButton("◀ Previous unshared spike")
        self.next_button = QPushButton("Next unshared spike ▶")
        for b, step in ((self.previous_button, -1), (self.next_button, 1)):
            b.setToolTip("Centre the trace view on a spike only one side holds")
            b.clicked.connect(lambda _=False, s=step: self.step_unshared(s))
        nav = QHBoxLayout()
        for w in (self.show_button, self.previous_button, self.next_button):
            nav.addWidget(w)
        nav.addStretch(1)

        grid = QGridLayout()
        grid.setContentsMargins(0, 0, 0, 0)
        grid.addWidget(self.waveforms, 0, 0, 1, 2)
        grid.addWidget(self.isi, 1, 0)
        grid.addWidget(self.amplitude, 1, 1)
        grid.setRowStretch(0, 5)
        grid.setRowStretch(1, 4)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.setSpacing(3)
        lay.addWidget(self.header)
        lay.addWidget(self.key)
        lay.addLayout(grid, 1)
        lay.addLayout(nav)
        lay.addWidget(self.note)
        self.show_pair(None)

    # ---- drawing ----------------------------------------------------------------------------
    def show_pair(self, pair: PairView | None, refractory_ms: tuple[float, float] = (0.0, 1.5),
                  header: str = "", group: int | None = None) -> None:
        """Draw ``pair`` (None clears); ``refractory_ms`` is the shaded (censored, refractory)
        window of the ISI plot; ``header`` the rich-text line above the plots."""
        self.pair, self.group = pair, group
        for b in (self.show_button, self.previous_button, self.next_button):
            b.setEnabled(pair is not None)
        self.header.setText(header or "Choose an imported unit in the table to see it beside its closest fresh unit.")
        self.key.setText(key_text(pair))
        self._draw_waveforms()
        self._draw_isi(refractory_ms)
        self._draw_amplitudes()

    def _sides(self) -> list[tuple[str, UnitView]]:
        return sides_of(self.pair)

    def _draw_waveforms(self) -> None:
        pi = self.waveforms.getPlotItem()
        pi.clear()
        self.wave_curves = {}
        self.wave_channels = np.zeros(0, dtype=np.int64)
        sides = [(n, s) for n, s in self._sides() if len(s.waveforms)]
        if not sides:
            return
        chans = shown_channels(self.pair)
        self.wave_channels = chans
        t = self.pair.imported.waveform_times_ms
        span = float(t[-1] - t[0])
        step = span * (1 + GAP_FRACTION)
        lo, hi = 0.0, 0.0
        for name, side in sides:
            mean, sd = side.waveforms.mean(axis=0), side.waveforms.std(axis=0)
            colour = colour_of(name)
            xs, ys = [], []
            for j, ch in enumerate(chans):
                hit = np.flatnonzero(side.channels == ch)
                if not len(hit):
                    continue
                k, x = int(hit[0]), t + j * step
                lower = pg.PlotCurveItem(x, mean[:, k] - sd[:, k], pen=pg.mkPen(None))
                upper = pg.PlotCurveItem(x, mean[:, k] + sd[:, k], pen=pg.mkPen(None))
                for item in (lower, upper, pg.FillBetweenItem(lower, upper, brush=(*colour, 40))):
                    pi.addItem(item)
                xs.append(np.append(x, np.nan))
                ys.append(np.append(mean[:, k], np.nan))
                lo = min(lo, float((mean[:, k] - sd[:, k]).min()))
                hi = max(hi, float((mean[:, k] + sd[:, k]).max()))
            curve = pg.PlotCurveItem(np.concatenate(xs), np.concatenate(ys), connect="finite",
                                     pen=palette.pen(colour, 2.2, dash=name == "fresh"))
            pi.addItem(curve)
            self.wave_curves[name] = curve
        main = self.pair.row.get("main_channel")
        for j, ch in enumerate(chans):
            text = f"ch {int(ch)}" + (" (main)" if main is not None and int(ch) == int(main) else "")
            label = pg.TextItem(text, color=palette.FOREGROUND, anchor=(0.5, 0))
            label.setPos(j * step + 0.5 * (t[0] + t[-1]), hi + 0.35 * (hi - lo))
            pi.addItem(label)
        marks = np.arange(np.ceil(t[0] / TICK_MS), np.floor(t[-1] / TICK_MS) + 1) * TICK_MS
        pi.getAxis("bottom").setTicks([[(j * step + v, f"{v:g}") for j in range(len(chans)) for v in marks], []])
        pi.setYRange(lo - 0.05 * (hi - lo), hi + 0.4 * (hi - lo), padding=0)
        pi.setXRange(t[0], t[0] + step * len(chans) - span * GAP_FRACTION, padding=0.02)

    def _draw_isi(self, refractory_ms: tuple[float, float]) -> None:
        pi = self.isi.getPlotItem()
        pi.clear()
        self.isi_curves = {}
        sides = self._sides()
        if not sides:
            return
        pi.addItem(self.refractory)
        self.refractory.setRegion(refractory_ms)
        for name, side in sides:
            curve = step_curve(side.isi_edges_s, side.isi_counts, colour_of(name), 1e3)
            curve.setPen(palette.pen(colour_of(name), 1.8, dash=name == "fresh"))
            pi.addItem(curve)
            self.isi_curves[name] = curve
        pi.setXRange(0.0, float(sides[0][1].isi_edges_s[-1]) * 1e3, padding=0.01)

    def _draw_amplitudes(self) -> None:
        for item in self.amp_items.values():
            item.setData([], [])
        for name, side in self._sides():
            for shared in (True, False):
                keep = side.shared == shared
                self.amp_items[(name, shared)].setData(side.times_s[keep], side.amplitudes_uv[keep])
        if self.pair is not None:
            self.amplitude.getPlotItem().setXRange(0.0, self.bench.recording.duration_s, padding=0.01)

    # ---- the trace view ---------------------------------------------------------------------
    def show_on_trace(self) -> None:
        """Show the imported unit's channel group in the trace view."""
        if self.group is not None and self.bench.recording is not None:
            self.bench.show_group(self.group)

    def unshared_times(self) -> np.ndarray:
        """Sorted times (s) of spikes only one side holds."""
        parts = [side.times_s[~side.shared] for _, side in self._sides()]
        return np.sort(np.concatenate(parts)) if parts else np.zeros(0)

    def step_unshared(self, step: int) -> bool:
        """Centre the trace view on the next (step 1) or previous (-1) unshared spike; False if none."""
        times = self.unshared_times()
        t0, t1 = self.bench.view
        centre, half = 0.5 * (t0 + t1), 0.5 * (t1 - t0)
        eps = 1e-6
        pick = times[times > centre + eps] if step > 0 else times[times < centre - eps]
        if not len(pick):
            self.note.setText("No further spike held by one side only in this direction.")
            return False
        t = float(pick[0] if step > 0 else pick[-1])
        duration = self.bench.recording.duration_s
        start = min(max(0.0, t - half), max(0.0, duration - 2 * half))
        self.show_on_trace()
        self.bench.set_view(start, start + 2 * half)
        self.note.setText(f"Trace view centred on {t:.4f} s.")
        return True
