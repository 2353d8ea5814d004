"""Where a unit sits on a probe and how fast it moves along it, from its events' positions.

Every event of a probe recording carries an estimated position (``x_um``, ``y_um``: the
amplitude-weighted centre of mass over its peak site's neighbourhood, see
:mod:`rigside.core.signal.probe_detection`). A unit's position is the median of its events'
positions, coordinate by coordinate. Why the median of the events and not a centre of mass of the
unit's mean peak amplitudes: it needs no second pass over the recording (the unit table is
recomputed after every curation step from the event table alone), and a median ignores the few
events that are not the unit's (overlapping spikes of a neighbour, noise) where a mean waveform
takes them in. Both inherit the centre of mass's bias toward the peak site. On a drifting recording
the median is the middle of the unit's path (half its events lie on either side).

Drift is the unit's movement along the probe (``y_um``: probes move along their length) in
micrometres per minute: the Theil–Sen slope (Theil 1950, Sen 1968; ``scipy.stats.theilslopes``, the
reference implementation) of event ``y_um`` against event time. Theil–Sen is the median of the
slopes of all event pairs: stray events (another unit's, noise) move it much less than a
least-squares line (its breakdown point is about 29%, Sen 1968). Its cost grows with the square
of the events, so at most :data:`MAX_DRIFT_EVENTS` events spread evenly over the unit's train
enter it. Caution: the centre of mass moves slower than the unit between two sites and jumps where
the peak site changes, so over about a site pitch or more it follows the movement closely (30 um in
8 s at a 20 um pitch: within 12% of the truth on the synthetic probe, mostly a little below it),
over less it may not; and it cannot follow a unit past the last sites of the probe (within one
neighbourhood radius of an end it lags).
"""

from __future__ import annotations

import math

import numpy as np

from rigside.core.errors import RigsideError
from rigside.core.quality.metric_inputs import MetricValue, float_1d, same_length, spike_times, undefined
from rigside.core.signal.snippets import spread_subsample

POSITION_COLUMNS: dict[str, str] = {
    "x_um": "unit position across the probe: median of its events' x_um [um]",
    "y_um": "unit position along the probe (depth): median of its events' y_um [um]",
    "drift_um_per_min": "movement along the probe: Theil-Sen slope of its events' y_um against time "
                        "(Sen 1968) [um/min]",
    "drift_reason": "why drift_um_per_min is undefined",
}
"""Columns of the unit table on recordings with site positions (absent on bundles)."""
MAX_DRIFT_EVENTS = 300
"""Most events of one unit whose pairs enter the Theil–Sen slope, spread evenly over its train (choice:
the slope's scatter falls as one over the square root of the events, its cost grows with their square)."""
MIN_DRIFT_EVENTS = 10
"""Fewest events for a drift (choice, no source: fewer give slopes led by single events)."""
MIN_DRIFT_SPAN_S = 5.0
"""Shortest span of a unit's events for a drift (choice, no source: over a few seconds the slope per
minute extrapolates the scatter of single positions, e.g. hundreds of um/min on a 2 s demo)."""


def unit_position(x_um: np.ndarray, y_um: np.ndarray) -> tuple[float, float]:
    """A unit's position: the medians of its events' ``x_um`` and ``y_um``.

    Parameters
    ----------
    x_um, y_um
        Estimated position of each of the unit's events (micrometres, at least one event).

    Returns
    -------
    tuple of float
        ``(x_um, y_um)``.
    """
    x, y = float_1d(x_um, "event x positions"), float_1d(y_um, "event y positions")
    same_length(len(x), **{"event y positions": y})
    if not len(x):
        raise RigsideError("a unit's position needs events, got none")
    return float(np.median(x)), float(np.median(y))


def position_drift(times_s: np.ndarray, y_um: np.ndarray, max_events: int = MAX_DRIFT_EVENTS) -> MetricValue:
    """Drift of one unit along the probe: Theil–Sen slope of its events' ``y_um`` against time.

    Parameters
    ----------
    times_s
        Sorted event times (s).
    y_um
        Position along the probe of each event (micrometres).
    max_events
        Most events entering the slope, spread evenly over the train (the pairs grow with its square).

    Returns
    -------
    MetricValue
        Micrometres per minute (positive: toward higher ``y_um``); NaN with a reason below
        :data:`MIN_DRIFT_EVENTS` events or when the events span less than :data:`MIN_DRIFT_SPAN_S`.
    """
    t = spike_times(times_s, name="event times")
    y = float_1d(y_um, "event y positions")
    same_length(len(t), **{"event y positions": y})
    if len(t) < MIN_DRIFT_EVENTS:
        return undefined(f"needs at least {MIN_DRIFT_EVENTS} events, got {len(t)}")
    if t[-1] == t[0]:
        return undefined("all events share one time")
    if t[-1] - t[0] < MIN_DRIFT_SPAN_S:
        return undefined(f"needs events over at least {MIN_DRIFT_SPAN_S:g} s, got {t[-1] - t[0]:.3g} s")
    from scipy.stats import theilslopes  # imported on first use: scipy.stats is slow to import

    keep = spread_subsample(len(t), max_events)
    slope = float(theilslopes(y[keep], t[keep] / 60.0).slope)
    return MetricValue(slope) if math.isfinite(slope) else undefined("the events' times give no slope")

