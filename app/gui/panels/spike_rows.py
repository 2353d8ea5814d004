"""Rows of spike times drawn in a band along the top of the trace view.

Each row holds one spike train: a short tick per spike in the row's colour, and the row's
symbol instead of the tick for flagged spikes, with a faint guide line running down through
the traces at each flagged spike while few are in view. Only the spikes inside the visible
time window are drawn (a ``searchsorted`` slice of the sorted times), into items made once
per row and refilled on every redraw.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyqtgraph as pg
from PySide6.QtGui import QFont, QFontMetrics
from PySide6.QtWidgets import QGraphicsRectItem

from rigside.gui import palette

ROW_PX = 20            # height of one row on screen (pixels)
TICK_SHARE = 0.7       # tick length as a share of the row height
FLAG_SIZE = 11         # size of a flagged spike's symbol (pixels)
GUIDE_LIMIT = 150      # flagged spikes in view up to which guide lines run through the traces
GUIDE_ALPHA = 110
MIN_BAND_SHARE = 0.35  # the band never takes more than this share of the plot's height
BACKDROP = (236, 238, 242)   # the band's fill, setting it apart from the traces


@dataclass
class SpikeRow:
    """One row: ``times_s`` sorted, ``flags`` a boolean mask of the same length."""

    label: str
    times_s: np.ndarray
    flags: np.ndarray
    colour: tuple
    symbol: str

    @classmethod
    def from_tuple(cls, row) -> "SpikeRow":
        """Check and sort ``(label, times_s, flags or None, colour, symbol)``."""
        label, times, flags, colour, symbol = row
        t = np.asarray(times, dtype=np.float64)
        if t.ndim != 1 or not np.all(np.isfinite(t)):
            raise ValueError(f"spike row times must be a 1-D array of finite seconds, got shape {t.shape} "
                             f"with {int(np.sum(~np.isfinite(t)))} non-finite values")
        f = np.zeros(len(t), dtype=bool) if flags is None else np.asarray(flags, dtype=bool)
        if f.shape != t.shape:
            raise ValueError(f"spike row flags must have one entry per time ({len(t)}), got shape {f.shape}")
        if len(t) > 1 and np.any(np.diff(t) < 0):
            order = np.argsort(t, kind="stable")
            t, f = t[order], f[order]
        return cls(str(label), t, f, tuple(colour[:3]), str(symbol))


class RowItems:
    """The plot items of one row, reused from redraw to redraw."""

    def __init__(self, row: SpikeRow) -> None:
        self.ticks = pg.PlotCurveItem(pen=palette.pen(row.colour, 1.5), connect="pairs")
        self.marks = pg.ScatterPlotItem(symbol=row.symbol, size=FLAG_SIZE, pen=palette.pen(row.colour, 1.5),
                                        brush=pg.mkBrush(*row.colour, 200))
        self.guides = pg.PlotCurveItem(pen=palette.pen((*row.colour, GUIDE_ALPHA), 1), connect="pairs")
        self.guides.setZValue(-5)

    def all(self) -> tuple:
        return self.guides, self.ticks, self.marks

    def restyle(self, row: SpikeRow) -> None:
        self.ticks.setPen(palette.pen(row.colour, 1.5))
        self.marks.setSymbol(row.symbol)
        self.marks.setPen(palette.pen(row.colour, 1.5))
        self.marks.setBrush(pg.mkBrush(*row.colour, 200))
        self.guides.setPen(palette.pen((*row.colour, GUIDE_ALPHA), 1))


class SpikeRows:
    """The rows of every owner (``key``), stacked top-down in the order the owners first set them."""

    def __init__(self, plot: pg.PlotItem) -> None:
        self.plot = plot
        self.rows: dict[str, list[SpikeRow]] = {}
        self.items: dict[str, list[RowItems]] = {}
        self.pitch = 0.0      # row height in data units
        self.base = 0.0       # y of the band's lower edge
        self.floor = 0.0      # y down to which guide lines run
        self.backdrop = QGraphicsRectItem()
        self.backdrop.setPen(pg.mkPen(None))
        self.backdrop.setBrush(pg.mkBrush(*BACKDROP))
        self.backdrop.setZValue(-20)
        self.backdrop.setVisible(False)
        plot.addItem(self.backdrop, ignoreBounds=True)

    def count(self) -> int:
        return sum(len(r) for r in self.rows.values())

    def labels(self) -> list[str]:
        return [r.label for rows in self.rows.values() for r in rows]

    def set(self, key: str, rows) -> bool:
        """Replace the rows of ``key``; True if the rows' number or labels changed."""
        new = [SpikeRow.from_tuple(r) for r in rows]
        before = self.labels()
        items = self.items.setdefault(key, [])
        while len(items) > len(new):
            for item in items.pop().all():
                self.plot.removeItem(item)
        for i, row in enumerate(new):
            if i < len(items):
                items[i].restyle(row)
            else:
                items.append(RowItems(row))
                for item in items[-1].all():
                    self.plot.addItem(item, ignoreBounds=True)
        self.rows[key] = new
        if not new:
            self.rows.pop(key)
            self.items.pop(key)
        return self.labels() != before

    def clear(self, key: str) -> bool:
        """Remove the rows of ``key``; True if there were any."""
        return self.set(key, []) if key in self.rows else False

    def layout(self, top: float, span: float, height_px: float) -> float:
        """Place the band above ``top`` (the lanes' upper edge), ``span`` being the data height
        of the lanes and ``height_px`` the plot's height; returns the band's data height."""
        n = self.count()
        self.base, self.floor = top, top - span
        if n == 0:
            self.pitch = 0.0
            return 0.0
        share = min(MIN_BAND_SHARE, n * ROW_PX / max(height_px, 1.0))
        self.pitch = share * span / (1.0 - share) / n
        return n * self.pitch

    def centres(self) -> list[float]:
        """y of each row's centre, top row first."""
        n = self.count()
        return [self.base + (n - i - 0.5) * self.pitch for i in range(n)]

    def ticks(self) -> list[tuple[float, str]]:
        """Axis labels of the rows."""
        return list(zip(self.centres(), self.labels()))

    def label_width(self, font: QFont) -> int:
        """Pixels the widest row label needs."""
        fm = QFontMetrics(font)
        return max((fm.horizontalAdvance(label) for label in self.labels()), default=0)

    def draw(self, t0: float, t1: float) -> None:
        """Draw the spikes of every row in ``[t0, t1)``."""
        self.backdrop.setVisible(self.count() > 0)
        self.backdrop.setRect(t0, self.base, t1 - t0, self.count() * self.pitch)
        ys = iter(self.centres())
        half = 0.5 * TICK_SHARE * self.pitch
        for key, rows in self.rows.items():
            for row, items in zip(rows, self.items[key]):
                y = next(ys)
                lo, hi = np.searchsorted(row.times_s, [t0, t1])
                t, f = row.times_s[lo:hi], row.flags[lo:hi]
                plain, flagged = t[~f], t[f]
                items.ticks.setData(np.repeat(plain, 2), np.tile([y + half, y - half], len(plain)))
                items.marks.setData(flagged, np.full(len(flagged), y))
                if 0 < len(flagged) <= GUIDE_LIMIT:
                    items.guides.setData(np.repeat(flagged, 2), np.tile([y - half, self.floor], len(flagged)))
                else:
                    items.guides.setData([], [])

    def drawn(self, key: str) -> list[tuple[np.ndarray, np.ndarray]]:
        """(tick times, flagged times) drawn now for each row of ``key``."""
        out = []
        for items in self.items.get(key, []):
            x, _ = items.ticks.getData()
            fx, _ = items.marks.getData()
            out.append((np.zeros(0) if x is None else np.asarray(x[0::2]),
                        np.zeros(0) if fx is None else np.asarray(fx)))
        return out
