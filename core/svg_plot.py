"""Small inline-SVG plots for self-contained HTML reports (no plotting library needed).

:class:`Axes` maps data to pixels and collects elements (lines, bands, points, steps);
:meth:`Axes.svg` adds the frame, ticks and labels. Points are drawn as very short round-capped
path segments, so thousands of them stay compact.
"""

from __future__ import annotations

import itertools
import math
from html import escape

import numpy as np

PAD_LEFT, PAD_RIGHT, PAD_TOP, PAD_BOTTOM = 48, 10, 22, 34
_CLIP_IDS = itertools.count(1)   # clip-path ids, unique within one process (and so one report)


def nice_ticks(lo: float, hi: float, n: int = 5) -> list[float]:
    """Round tick values covering ``[lo, hi]`` (about ``n`` of them)."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo] if math.isfinite(lo) else []
    raw = (hi - lo) / max(n, 1)
    mag = 10 ** math.floor(math.log10(raw))
    step = next(m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw)
    first = math.ceil(lo / step - 1e-9) * step
    return [first + k * step for k in range(int((hi - first) / step + 1e-9) + 1)]


def _fmt(v: float) -> str:
    return f"{v:.1f}".rstrip("0").rstrip(".")


def _limits(values: list[np.ndarray], pad: float = 0.05) -> tuple[float, float]:
    finite = [v[np.isfinite(v)] for v in values if len(v)]
    finite = [v for v in finite if len(v)]
    if not finite:
        return 0.0, 1.0
    lo = min(float(v.min()) for v in finite)
    hi = max(float(v.max()) for v in finite)
    if hi == lo:
        return lo - 1, hi + 1
    span = hi - lo
    return lo - pad * span, hi + pad * span


class Axes:
    """One plot of ``width`` x ``height`` pixels with data limits ``xlim`` and ``ylim``."""

    def __init__(self, width: int, height: int, xlim, ylim, title: str = "", xlabel: str = "",
                 ylabel: str = "", xticks: bool = True):
        self.w, self.h = width, height
        self.x0, self.x1 = float(xlim[0]), float(xlim[1])
        self.y0, self.y1 = float(ylim[0]), float(ylim[1])
        self.title, self.xlabel, self.ylabel, self.show_xticks = title, xlabel, ylabel, xticks
        self.parts: list[str] = []

    def px(self, x) -> np.ndarray:
        span = (self.x1 - self.x0) or 1.0
        return PAD_LEFT + (np.asarray(x, float) - self.x0) / span * (self.w - PAD_LEFT - PAD_RIGHT)

    def py(self, y) -> np.ndarray:
        span = (self.y1 - self.y0) or 1.0
        return self.h - PAD_BOTTOM - (np.asarray(y, float) - self.y0) / span * (self.h - PAD_TOP - PAD_BOTTOM)

    @staticmethod
    def _path(xs: np.ndarray, ys: np.ndarray) -> str:
        ok = np.isfinite(xs) & np.isfinite(ys)
        return "M" + "L".join(f"{_fmt(x)} {_fmt(y)}" for x, y in zip(xs[ok], ys[ok])) if ok.any() else ""

    def line(self, x, y, color: str, width: float = 1.2, opacity: float = 1.0) -> None:
        d = self._path(self.px(x), self.py(y))
        if d:
            self.parts.append(f'<path d="{d}" fill="none" stroke="{color}" stroke-width="{width}" '
                              f'stroke-opacity="{opacity}"/>')

    def band(self, x, lo, hi, color: str, opacity: float = 0.2) -> None:
        xs, a, b = self.px(x), self.py(lo), self.py(hi)
        d = self._path(np.concatenate([xs, xs[::-1]]), np.concatenate([a, b[::-1]]))
        if d:
            self.parts.append(f'<path d="{d}Z" fill="{color}" fill-opacity="{opacity}" stroke="none"/>')

    def points(self, x, y, color: str, size: float = 2.5, opacity: float = 0.6) -> None:
        xs, ys = self.px(x), self.py(y)
        ok = np.isfinite(xs) & np.isfinite(ys)
        if ok.any():
            d = "".join(f"M{_fmt(a)} {_fmt(b)}h0.1" for a, b in zip(xs[ok], ys[ok]))
            self.parts.append(f'<path d="{d}" fill="none" stroke="{color}" stroke-width="{size}" stroke-linecap="round" '
                              f'stroke-opacity="{opacity}"/>')

    def steps(self, edges, counts, color: str, width: float = 1.2) -> None:
        e = np.asarray(edges, float)
        c = np.asarray(counts, float)
        self.line(np.repeat(e, 2)[1:-1], np.repeat(c, 2), color, width)

    def vline(self, x: float, color: str = "#888", dash: str = "3 3") -> None:
        px = _fmt(float(self.px(x)))
        self.parts.append(f'<line x1="{px}" x2="{px}" y1="{PAD_TOP}" y2="{self.h - PAD_BOTTOM}" stroke="{color}" '
                          f'stroke-dasharray="{dash}"/>')

    def text(self, x: float, y: float, s: str, color: str = "#333", anchor: str = "start") -> None:
        self.parts.append(f'<text x="{_fmt(x)}" y="{_fmt(y)}" fill="{color}" text-anchor="{anchor}">'
                          f'{escape(s)}</text>')

    def svg(self) -> str:
        """The finished ``<svg>`` element."""
        left, right, top, bottom = PAD_LEFT, self.w - PAD_RIGHT, PAD_TOP, self.h - PAD_BOTTOM
        out = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{self.w}" height="{self.h}" '
               f'font-family="sans-serif" font-size="10">',
               f'<rect x="{left}" y="{top}" width="{right - left}" height="{bottom - top}" fill="#fff" stroke="#999"/>']
        ticks = []
        if self.show_xticks:
            for t in nice_ticks(self.x0, self.x1):
                px = _fmt(float(self.px(t)))
                ticks.append(f'<line x1="{px}" x2="{px}" y1="{bottom}" y2="{bottom + 3}" stroke="#999"/>'
                             f'<text x="{px}" y="{bottom + 13}" text-anchor="middle">{t:g}</text>')
        for t in nice_ticks(self.y0, self.y1, 4):
            py = _fmt(float(self.py(t)))
            ticks.append(f'<line x1="{left - 3}" x2="{left}" y1="{py}" y2="{py}" stroke="#999"/>'
                         f'<text x="{left - 5}" y="{py}" text-anchor="end" dominant-baseline="middle">{t:g}</text>')
        out += ticks
        clip = f"clip{next(_CLIP_IDS)}"
        out.append(f'<defs><clipPath id="{clip}"><rect x="{left}" y="{top}" width="{right - left}" '
                   f'height="{bottom - top}"/></clipPath></defs><g clip-path="url(#{clip})">' + "".join(self.parts) + "</g>")
        out.append(f'<text x="{left}" y="{top - 8}" font-weight="bold">{escape(self.title)}</text>')
        out.append(f'<text x="{(left + right) / 2:.0f}" y="{self.h - 4}" text-anchor="middle">{escape(self.xlabel)}</text>')
        out.append(f'<text transform="translate(11 {(top + bottom) / 2:.0f}) rotate(-90)" text-anchor="middle">'
                   f'{escape(self.ylabel)}</text>')
        out.append("</svg>")
        return "".join(out)


def auto_axes(width: int, height: int, xs: list[np.ndarray], ys: list[np.ndarray], **labels) -> Axes:
    """Axes whose limits cover every array in ``xs`` and ``ys`` (with a small margin)."""
    return Axes(width, height, _limits(xs, 0.0), _limits(ys), **labels)


def heatmap(matrix: np.ndarray, row_labels, col_labels, title: str, cell: int = 12,
            color: str = "38,110,140") -> str:
    """A matrix of values in [0, 1] as shaded cells (darker: higher), with row and column labels."""
    m = np.asarray(matrix, float)
    left, top = 60, 40
    w, h = max(left + cell * m.shape[1] + 10, 8 * len(title)), top + cell * m.shape[0] + 10
    out = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" font-family="sans-serif" font-size="9">',
           f'<text x="0" y="12" font-weight="bold" font-size="11">{escape(title)}</text>']
    for j, lab in enumerate(col_labels):
        x = left + j * cell + cell / 2
        out.append(f'<text transform="translate({x:.0f} {top - 3}) rotate(-60)">{escape(str(lab))}</text>')
    for i, lab in enumerate(row_labels):
        y = top + i * cell
        out.append(f'<text x="{left - 3}" y="{y + cell - 2}" text-anchor="end">{escape(str(lab))}</text>')
        for j in range(m.shape[1]):
            v = m[i, j]
            if v > 0:
                out.append(f'<rect x="{left + j * cell}" y="{y}" width="{cell}" height="{cell}" '
                           f'fill="rgb({color})" fill-opacity="{min(v, 1.0):.2f}"><title>{v:.2f}</title></rect>')
    out.append(f'<rect x="{left}" y="{top}" width="{cell * m.shape[1]}" height="{cell * m.shape[0]}" '
               f'fill="none" stroke="#999"/></svg>')
    return "".join(out)
