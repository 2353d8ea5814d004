"""Event marks on the trace view: a tick per event, or a pixel rug when events are dense."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg

from rigside.core.event_pixels import ARTEFACT, EVENT, event_pixels
from rigside.gui import palette

MARKER_LIMIT = 4000       # more events in view than this: one mark per pixel and channel
MARK_TOP, MARK_LENGTH = 0.48, 0.14  # tick row at the top of a lane (fractions of the lane)
RUG_ROWS = 10             # image rows per trace lane for the dense marks
RUG_COLOURS = np.zeros((4, 4), dtype=np.uint8)
"""RGBA of a dense mark pixel by its bits: none, an event, an artefact, both (drawn as an event)."""
RUG_COLOURS[ARTEFACT] = (*palette.ARTEFACT, 255)
RUG_COLOURS[EVENT] = RUG_COLOURS[EVENT | ARTEFACT] = (*palette.EVENT, 255)


class EventMarks:
    """Ticks at the top of each channel's lane, at the peak time of each event at or above
    the channel's threshold (vermillion; grey for artefacts); events of highlighted sets
    (selected units) get a triangle in their set's colour under the tick. When more events are in view
    than can be told apart, one mark per screen pixel and channel is drawn in that row as
    a small image instead."""

    def __init__(self) -> None:
        self.events = pg.PlotCurveItem(pen=palette.pen(palette.EVENT, 2), connect="pairs")
        self.artefacts = pg.PlotCurveItem(pen=palette.pen(palette.ARTEFACT, 2), connect="pairs")
        self.rug = pg.ImageItem(axisOrder="row-major")
        self.rug.setVisible(False)
        self._rug_rgba: np.ndarray | None = None
        self.dense = False
        self.chosen = pg.ScatterPlotItem(size=9, symbol="t", pen=pg.mkPen(palette.BLACK, width=0.5))
        self.highlights: list[tuple[np.ndarray, tuple]] = []
        self._rows: tuple | None = None

    def items(self) -> tuple:
        return self.artefacts, self.events, self.rug, self.chosen

    def times(self) -> np.ndarray:
        """Times (s) of the event ticks drawn now."""
        x, _ = self.events.getData()
        return np.zeros(0) if x is None else np.asarray(x[0::2])

    def clear(self) -> None:
        self.events.setData([], [])
        self.artefacts.setData([], [])
        self.chosen.setData([], [])
        self.rug.setVisible(False)

    def draw(self, bench, offsets: np.ndarray, lane: np.ndarray, spacing: float, a: int, z: int,
             width: int) -> None:
        """Mark the events of samples ``[a, z)`` on the shown channels at the current thresholds."""
        ev = bench.events
        if ev is None or bench.recording is None or not len(offsets):
            self.clear()
            return
        thr = bench.thresholds_sigma.astype(np.float32)
        flags, passing = event_pixels(ev, lane, thr, a, z, width)
        self.dense = passing > MARKER_LIMIT
        self.rug.setVisible(self.dense)
        if self.dense:
            self.events.setData([], [])
            self.artefacts.setData([], [])
            self.chosen.setData([], [])
            self._draw_rug(flags, offsets, spacing, a, z, ev.rate_hz)
            return
        i0, i1 = np.searchsorted(ev.sample, [a, z])
        rows = self._rows_in_view(ev, lane, a, z)
        lanes = lane[ev.channel[rows]]
        passing = ev.amplitude_sigma[rows] >= thr[ev.channel[rows]]
        art = ev.artefact[rows]
        for item, keep in ((self.events, passing & ~art), (self.artefacts, passing & art)):
            idx = np.flatnonzero(keep)
            top = offsets[lanes[idx]] + MARK_TOP * spacing
            y = np.empty(2 * len(idx))
            y[0::2] = top
            y[1::2] = top - MARK_LENGTH * spacing
            item.setData(np.repeat(ev.sample[rows[idx]] / ev.rate_hz, 2), y, connect="pairs")
        self._draw_chosen(ev, lane, offsets, spacing, i0, i1)

    def _rows_in_view(self, ev, lane: np.ndarray, a: int, z: int) -> np.ndarray:
        """Rows of the events on the shown channels in samples ``[a, z)`` (a probe has hundreds of channels), kept
        while the view and the table stay: a threshold drag asks for them on every move."""
        key = (a, z, lane.tobytes())
        if self._rows is None or self._rows[0] is not ev or self._rows[1] != key:
            self._rows = (ev, key, ev.rows_on(np.flatnonzero(lane >= 0), a, z))
        return self._rows[2]

    def _draw_chosen(self, ev, lane, offsets, spacing, i0: int, i1: int) -> None:
        """A marker in the unit's colour under the tick of each event of a selected unit."""
        xs, ys, brushes = [], [], []
        for rows, colour in self.highlights:
            rows = rows[(rows >= i0) & (rows < i1)]
            rows = rows[lane[ev.channel[rows]] >= 0]
            xs.append(ev.sample[rows] / ev.rate_hz)
            ys.append(offsets[lane[ev.channel[rows]]] + (MARK_TOP - MARK_LENGTH) * spacing)
            brushes += [pg.mkBrush(*colour[:3])] * len(rows)
        if brushes:
            self.chosen.setData(np.concatenate(xs), np.concatenate(ys), brush=brushes)
        else:
            self.chosen.setData([], [])

    @property
    def rug_pixels(self) -> np.ndarray:
        """Which pixels of the dense marks' image are drawn (rows bottom-up, as the image lies)."""
        rgba = self._rug_rgba
        return np.zeros((0, 0), dtype=bool) if rgba is None else rgba[..., 3] > 0

    def _draw_rug(self, flags: np.ndarray, offsets, spacing, a, z, rate) -> None:
        n, width = len(offsets), flags.shape[1]
        shape = (RUG_ROWS * n, width, 4)
        if self._rug_rgba is None or self._rug_rgba.shape != shape:
            self._rug_rgba = np.zeros(shape, dtype=np.uint8)   # kept: only the mark rows change from move to move
        rgba = self._rug_rgba
        # lane 0 is at the top; image row 0 is at the bottom of the rug's rectangle
        marks = rgba[RUG_ROWS - 1::RUG_ROWS][::-1]
        lanes = np.zeros((n, width), dtype=np.uint8)
        lanes[:len(flags)] = flags
        marks[...] = RUG_COLOURS[lanes]
        self.rug.setImage(rgba, autoLevels=False)
        bottom = offsets[-1] - 0.5 * spacing
        self.rug.setRect(a / rate, bottom, (z - a) / rate, n * spacing)
