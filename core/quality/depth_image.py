"""Events of a probe as a depth-against-time image, coloured by amplitude, for the drift view.

A recording of an hour holds millions of events: drawn one by one they cost seconds and hide each
other. The view draws a grid instead: time bins across the shown span, depth bins along the shank,
each cell holding the largest event amplitude among the events inside it (NaN where none lies). So
the cost of drawing is at most :data:`MAX_TIME_BINS` x :data:`MAX_DEPTH_BINS` cells whatever the
number of events, a lone event still shows as its own cell, and where events crowd a cell the
strongest wins: the bands of large units, whose depth moves with drift, stay visible over the many
small events near the threshold. The amplitude of an event is its magnitude in microvolts.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from rigside.core.errors import RigsideError
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.quality.metric_inputs import float_1d, same_length

if TYPE_CHECKING:
    from rigside.core.events import EventTable

MAX_TIME_BINS = 1000
"""Most time bins across the shown span (about one per screen pixel of a wide view)."""
MAX_DEPTH_BINS = 800
"""Most depth bins along the shank."""
DEPTH_BIN_UM = 2.0
"""Depth bin width while the shank is short enough (a tenth of a 20 um pitch)."""
LEVEL_PERCENTILES = (1.0, 99.0)
"""Amplitude percentiles that set the colour scale (the outliers beyond saturate)."""
MARGIN_UM = 10.0
"""Depth shown beyond the outermost sites of the shank."""


@dataclass(frozen=True)
class DepthImage:
    """Largest event amplitude per (time, depth) cell.

    Attributes
    ----------
    values
        ``(time bins, depth bins)`` float32 amplitudes (uV), NaN where no event lies.
    time_range, depth_range
        ``(start, stop)`` covered by the grid (s and um); cell ``(i, j)`` spans equal shares of each.
    n_events
        Events inside the grid.
    levels
        Colour scale ``(low, high)`` in uV (:func:`amplitude_levels`).
    """

    values: np.ndarray
    time_range: tuple[float, float]
    depth_range: tuple[float, float]
    n_events: int
    levels: tuple[float, float] = (0.0, 1.0)


def depth_bins(depth_range: tuple[float, float]) -> int:
    """Depth bins for a shank span: :data:`DEPTH_BIN_UM` wide, at most :data:`MAX_DEPTH_BINS`."""
    return max(1, min(MAX_DEPTH_BINS, math.ceil((depth_range[1] - depth_range[0]) / DEPTH_BIN_UM)))


def depth_image(time_s: np.ndarray, depth_um: np.ndarray, amplitude_uv: np.ndarray,
                time_range: tuple[float, float], depth_range: tuple[float, float],
                time_bins: int = MAX_TIME_BINS, n_depth_bins: int | None = None) -> DepthImage:
    """Grid the events: in each (time, depth) cell the largest amplitude magnitude.

    Parameters
    ----------
    time_s, depth_um, amplitude_uv
        Per event: time (s), position along the probe (um) and signed amplitude (uV).
    time_range, depth_range
        ``(start, stop)`` of the grid, stop above start; events outside are left out.
    time_bins
        Time bins (at least 1).
    n_depth_bins
        Depth bins (default :func:`depth_bins` of the span).

    Returns
    -------
    DepthImage
        With the colour scale of every given event (inside the grid or not).
    """
    t, d = float_1d(time_s, "event times"), float_1d(depth_um, "event depths")
    a = np.abs(float_1d(amplitude_uv, "event amplitudes"))
    same_length(len(t), **{"event depths": d, "event amplitudes": a})
    (t0, t1), (d0, d1) = _span(time_range, "time range"), _span(depth_range, "depth range")
    nd = depth_bins((d0, d1)) if n_depth_bins is None else n_depth_bins
    if not (isinstance(time_bins, int) and time_bins >= 1 and isinstance(nd, int) and nd >= 1):
        raise RigsideError(f"image bins must be integers of at least 1, got {time_bins!r} x {nd!r}")
    inside = (t >= t0) & (t <= t1) & (d >= d0) & (d <= d1)
    ti = np.minimum(((t[inside] - t0) / (t1 - t0) * time_bins).astype(np.int64), time_bins - 1)
    di = np.minimum(((d[inside] - d0) / (d1 - d0) * nd).astype(np.int64), nd - 1)
    flat = np.full(time_bins * nd, -np.inf, dtype=np.float32)
    np.maximum.at(flat, ti * nd + di, a[inside].astype(np.float32))
    flat[np.isneginf(flat)] = np.nan
    return DepthImage(flat.reshape(time_bins, nd), (t0, t1), (d0, d1), int(np.count_nonzero(inside)),
                      amplitude_levels(a))


def event_depth_image(events: EventTable, channels: np.ndarray, site_depth_um: np.ndarray, threshold_sigma,
                      time_range: tuple[float, float], time_bins: int = MAX_TIME_BINS,
                      n_depth_bins: int | None = None, depth_range: tuple[float, float] | None = None,
                      progress: ProgressFn = None, cancel: CancelFn = None) -> DepthImage:
    """The drift view's image of one shank: its events at the threshold (artefacts left out).

    Parameters
    ----------
    events
        A probe's event table (with ``y_um``).
    channels, site_depth_um
        The shank's channels and their sites' positions along the probe (um); the image spans the
        sites and :data:`MARGIN_UM` beyond.
    threshold_sigma
        Threshold in sigma, one number or one per channel (:meth:`EventTable.mask`).
    time_range
        Time span shown (s); the colour scale comes from every event of the shank at the threshold,
        so that it stays put while the span changes.
    time_bins, n_depth_bins
        Time bins across the span and depth bins along the shank (default :func:`depth_bins`); a view
        gives about one cell per two screen pixels, so that a lone event shows.
    depth_range
        Depth span shown (um), cut to the shank's span; None (or no overlap): the shank's span.
    progress, cancel
        Progress callback and cancel check.
    """
    if events.y_um is None:
        raise RigsideError("the depth image needs event positions, got events of a recording without site positions")
    sites = float_1d(site_depth_um, "site depths")
    if not len(sites):
        raise RigsideError("the depth image needs the shank's sites, got none")
    on_shank = np.zeros(events.n_channels, dtype=bool)
    on_shank[np.asarray(channels, dtype=np.int64)] = True
    keep = events.mask(threshold_sigma=threshold_sigma) & on_shank[events.channel]
    check(cancel)
    span = (float(sites.min()) - MARGIN_UM, float(sites.max()) + MARGIN_UM)
    if depth_range is not None and min(span[1], depth_range[1]) > max(span[0], depth_range[0]):
        span = (max(span[0], float(depth_range[0])), min(span[1], float(depth_range[1])))
    image = depth_image(events.time_s[keep], events.y_um[keep], events.amplitude_uv[keep], time_range, span,
                        time_bins, n_depth_bins)
    report(progress, 1.0, "depth image")
    return image


def amplitude_levels(amplitude_uv: np.ndarray) -> tuple[float, float]:
    """Colour scale of the image: the :data:`LEVEL_PERCENTILES` of the amplitude magnitudes (uV);
    ``(0, 1)`` without events, and a span of at least 1 uV."""
    a = np.abs(float_1d(amplitude_uv, "event amplitudes"))
    if not len(a):
        return 0.0, 1.0
    lo, hi = (float(v) for v in np.percentile(a, LEVEL_PERCENTILES))
    return lo, max(hi, lo + 1.0)


def _span(pair, name: str) -> tuple[float, float]:
    lo, hi = (float(v) for v in pair)
    if not (math.isfinite(lo) and math.isfinite(hi) and hi > lo):
        raise RigsideError(f"{name} must be two finite numbers, the second above the first, got {pair!r}")
    return lo, hi
