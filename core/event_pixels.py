"""Which screen pixels hold an event: the dense event marks of a zoomed-out trace view.

A view of an hour holds millions of events; the trace view then draws one mark per pixel
column and channel lane instead of one tick per event. :func:`event_pixels` finds those
pixels in one compiled pass, in time order, over the events in view, without the per-event
temporaries (gathers, masks, pixel columns) a numpy version allocates.
"""

from __future__ import annotations

import numba
import numpy as np

from rigside.core.events import EventTable

EVENT, ARTEFACT = 1, 2
"""Bits of a pixel: an event at or above its channel's threshold; an artefact event at or above it."""


@numba.njit(nogil=True, cache=True)
def _mark(i0, i1, sample, channel, amplitude, artefact, lane, thr, a, scale, width, out):
    passing = 0
    for r in range(i0, i1):
        c = channel[r]
        if lane[c] < 0 or amplitude[r] < thr[c]:
            continue
        passing += 1
        px = min(int((sample[r] - a) * scale), width - 1)
        out[lane[c], px] |= ARTEFACT if artefact[r] else EVENT
    return passing


def event_pixels(events: EventTable, lane: np.ndarray, thresholds_sigma: np.ndarray, start: int, stop: int,
                 width: int) -> tuple[np.ndarray, int]:
    """Pixel flags of the events at or above threshold in samples ``[start, stop)``.

    Parameters
    ----------
    events
        The event table.
    lane
        Lane of each channel in the view (``-1``: not shown).
    thresholds_sigma
        Threshold of each channel (multiples of its noise).
    start, stop
        Samples shown; they span ``width`` pixel columns.
    width
        Pixel columns of the view (at least 1).

    Returns
    -------
    flags, passing
        uint8 ``(lanes, width)`` with :data:`EVENT` and :data:`ARTEFACT` bits, and the number of
        events at or above threshold in the view.
    """
    lane = np.asarray(lane, dtype=np.int64)
    n_lanes, width = int(lane.max(initial=-1)) + 1, max(1, int(width))
    out = np.zeros((n_lanes, width), dtype=np.uint8)
    i0, i1 = np.searchsorted(events.sample, [start, stop])
    if i0 == i1 or n_lanes == 0:
        return out, 0
    passing = _mark(int(i0), int(i1), events.sample, events.channel, events.amplitude_sigma, events.artefact, lane,
                    np.asarray(thresholds_sigma, dtype=np.float32), int(start), width / max(1, stop - start),
                    width, out)
    return out, int(passing)
