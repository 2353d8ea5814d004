"""Mean waveform of each selected unit on every channel of its group, with ± 1 SD spread."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QSpinBox

from rigside.core.signal.snippets import event_snippets, snippet_times_ms
from rigside.gui import palette
from rigside.gui.panels.unit_view_base import UnitView

MAX_UNITS = 4
MAX_CHANNELS = 8
GAP_FRACTION = 0.25


def _cut_units(recording, events, params, picks: dict, progress=None, cancel=None):
    """Snippets of each unit's chosen events: {unit: (snippets, channels)}."""
    out = {}
    for i, (u, idx) in enumerate(picks.items()):
        out[u] = event_snippets(recording, events, params, idx, cancel=cancel)
        if progress is not None:
            progress((i + 1) / len(picks), f"unit {u}")
    return out


class UnitWaveformView(UnitView):
    title = "Waveforms per channel"

    def __init__(self, controller, parent=None):
        super().__init__(controller, parent)
        self.columns: list[int] | None = None   # columns of the first shown unit's group drawn now
        self.per_unit = QSpinBox()
        self.per_unit.setRange(10, 2000)
        self.per_unit.setValue(200)
        self.per_unit.setToolTip("events cut per unit (a seeded random subset)")
        self.per_unit.setKeyboardTracking(False)
        self.per_unit.valueChanged.connect(self.refresh)
        self.add_control("events", self.per_unit)
        self.plot = palette.make_plot("time from peak (ms), one block per channel", "signal (µV)")
        self.finish_layout(self.plot)
        self.snippets: dict[int, tuple[np.ndarray, np.ndarray]] = {}

    def draw(self, units: list[int]) -> None:
        self.plot.getPlotItem().clear()
        self.snippets = {}
        units = units[:MAX_UNITS]
        rec = self.ctl.bench.recording
        s = self.ctl.session
        if not units:
            return
        if rec is None or Path(rec.path).resolve() != Path(s.recording.path).resolve():
            self.status.setText("Waveforms need the session's recording open in the window.")
            return
        rng = np.random.default_rng(0)
        picks = {}
        for u in units:
            idx = s.sorting.events_of(u)
            n = min(len(idx), self.per_unit.value())
            picks[u] = np.sort(rng.choice(idx, size=n, replace=False)) if n else idx
        self.status.setText("Cutting waveforms…")
        self.ctl.runner.submit("unit_waveforms", "Cutting unit waveforms", _cut_units, rec, s.events, s.params,
                               picks, on_done=lambda r, sel=tuple(units): self._show(r, sel))

    def _show(self, result: dict, units: tuple) -> None:
        if tuple(self.shown_units()[:MAX_UNITS]) != units:
            return
        self.snippets = result
        pi = self.plot.getPlotItem()
        pi.clear()
        s = self.ctl.session
        t = snippet_times_ms(s.params.snippets, s.events.rate_hz)
        span = t[-1] - t[0]
        step = span * (1 + GAP_FRACTION)
        lo, hi, n_cols, parts = 0.0, 0.0, 0, []
        groups = set()
        self.columns, first_group = None, None
        for u in units:
            snips, channels = result[u]
            if not len(snips):
                continue
            colour = self.ctl.unit_colour(u) or palette.GREY
            mean, sd = snips.mean(axis=0), snips.std(axis=0)
            if self.columns is None or tuple(channels) != first_group:   # the first unit's own channels,
                cols = _own_columns(mean)                                  # kept for others of its group
                if self.columns is None:
                    self.columns, first_group = cols, tuple(channels)
            else:
                cols = self.columns
            n_cols = max(n_cols, len(cols))
            groups.add(tuple(int(channels[c]) for c in cols))
            xs, ys = [], []
            for j, c in enumerate(cols):
                x = t + j * step
                lower = pg.PlotCurveItem(x, mean[:, c] - sd[:, c], pen=pg.mkPen(None))
                upper = pg.PlotCurveItem(x, mean[:, c] + sd[:, c], pen=pg.mkPen(None))
                pi.addItem(lower)
                pi.addItem(upper)
                pi.addItem(pg.FillBetweenItem(lower, upper, brush=(*colour, 45)))
                xs.append(np.append(x, np.nan))
                ys.append(np.append(mean[:, c], np.nan))
                lo, hi = min(lo, float((mean[:, c] - sd[:, c]).min())), max(hi, float((mean[:, c] + sd[:, c]).max()))
            pi.addItem(pg.PlotCurveItem(np.concatenate(xs), np.concatenate(ys), connect="finite",
                                        pen=palette.pen(colour, 2.2)))
            parts.append(f"{self.ctl.unit_name(u)}: {len(snips)} events")
        if not n_cols:
            return
        first = next(iter(groups))
        for j in range(n_cols):
            label = pg.TextItem(f"ch {first[j]}" if len(groups) == 1 else f"#{j + 1}", color=palette.FOREGROUND,
                                anchor=(0.5, 0))
            label.setPos(j * step + 0.5 * (t[0] + t[-1]), hi * 1.25 + 1)
            pi.addItem(label)
        ticks = [(j * step, "0") for j in range(n_cols)]
        pi.getAxis("bottom").setTicks([ticks, []])
        pi.setYRange(lo * 1.1, hi * 1.4 + 2, padding=0)
        pi.setXRange(t[0], t[0] + step * n_cols - span * GAP_FRACTION, padding=0.02)
        mixed = "" if len(groups) == 1 else " Units of different groups: blocks are channel positions in each group."
        self.status.setText("Mean (line) ± 1 SD (band) of a random subset; " + "; ".join(parts) + "." + mixed)


def _own_columns(mean: np.ndarray) -> list[int]:
    """Columns of a group to draw: all of a small group; on a larger one (a probe shank) the
    :data:`MAX_CHANNELS` where the unit's mean waveform is largest peak to peak, in the group's order."""
    if mean.shape[1] <= MAX_CHANNELS:
        return list(range(mean.shape[1]))
    return sorted(int(c) for c in np.argsort(-np.ptp(mean, axis=0), kind="stable")[:MAX_CHANNELS])
