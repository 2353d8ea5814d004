"""Where a session's events stand in the window's one event table of the recording.

The window keeps one event table per recording (every event down to the look-up floor); a
session stores its own events (those at its threshold, in the order its sorting assigns them).
:func:`session_rows` maps the second onto the first once, so that views of the table can show a
unit's events by row without matching times again. :func:`detection_at` cuts the events at a
threshold out of the table, the input of a new sorting, with their rows.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, NamedTuple

import numpy as np

from rigside.core.errors import RigsideError
from rigside.core.events import EventTable
from rigside.core.params import Params
from rigside.core.signal.features import Features
from rigside.core.signal.pipeline import params_at_thresholds, thresholds_sigma

if TYPE_CHECKING:
    from rigside.core.units.session import Session

MISSING = -1
"""Row given to a session event that the table does not hold."""


def session_rows(session: Session, table: EventTable) -> np.ndarray:
    """Row of ``table`` holding each event of ``session``.

    Parameters
    ----------
    session
        A session whose ``events`` its sorting assigns to units.
    table
        An event table of the same recording (e.g. the window's, down to its look-up floor).

    Returns
    -------
    numpy.ndarray
        int64, one entry per session event: the row of ``table`` with the same sample and channel
        (an event's identity in a recording), :data:`MISSING` where the table holds no such event or
        describes another recording length or rate. ``np.arange`` when the session's events are
        ``table`` itself.
    """
    events = session.events
    if events is table:
        return np.arange(len(table), dtype=np.int64)
    out = np.full(len(events), MISSING, dtype=np.int64)
    if not len(table) or not len(events) or (table.n_samples, table.rate_hz) != (events.n_samples, events.rate_hz):
        return out
    n_ch = max(table.n_channels, events.n_channels, int(table.channel.max()) + 1, int(events.channel.max()) + 1)
    keys = table.sample * n_ch + table.channel
    order = np.argsort(keys, kind="stable")
    wanted = events.sample * n_ch + events.channel
    at = order[np.minimum(np.searchsorted(keys, wanted, sorter=order), len(keys) - 1)]
    found = keys[at] == wanted
    out[found] = at[found]
    return out


class Detection(NamedTuple):
    """Events at a threshold, cut out of an event table by :func:`detection_at`."""

    rows: np.ndarray
    """Their rows of the table (increasing)."""
    events: EventTable
    """Those rows, a table of their own (a new session's events)."""
    features: Features
    """Their features."""
    params: Params
    """The parameters detecting at that threshold (:func:`rigside.core.signal.pipeline.params_at_thresholds`)."""


def detection_at(table: EventTable, features: Features, params: Params, thresholds: np.ndarray) -> Detection:
    """The events of ``table`` at per-channel ``thresholds`` (artefacts kept: they go to no unit).

    Parameters
    ----------
    table
        Events down to a look-up floor, with their ``features`` (one row per event).
    params
        Parameters of the detection (copied, not changed).
    thresholds
        Threshold per channel in sigma multiples (one value for every channel in sigma or microvolts,
        or values set per channel: then kept per channel in the parameters).

    Returns
    -------
    Detection
        Rows, events, features and the parameters at the threshold.

    Raises
    ------
    RigsideError
        When a live channel's threshold is not a finite number above 0, or no event reaches them.
    """
    at = params_at_thresholds(params, thresholds, table.sigma_uv)
    keep = table.mask(threshold_sigma=thresholds_sigma(at, table.sigma_uv), include_artefacts=True)
    if not keep.any():
        raise RigsideError("clustering needs events at the current threshold, got none")
    return Detection(np.flatnonzero(keep), table.subset(keep), Features(features.values[keep], list(features.names)),
                     at)
