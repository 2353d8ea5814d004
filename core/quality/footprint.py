"""A unit's footprint on a probe: its mean filtered waveform on the sites around its largest one.

The mean waveform comes from :func:`rigside.core.quality.suggestions.mean_waveforms` (at most
``n_events`` of the unit's events spread over the recording, cut on every site of its shank); the
sites kept are the neighbourhood (:mod:`rigside.core.signal.neighbourhoods`) of the site where that
mean reaches its largest absolute value, so the window can draw a small waveform at each of them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rigside.core.errors import RigsideError
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn
from rigside.core.quality.suggestions import mean_waveforms
from rigside.core.signal.neighbourhoods import neighbourhoods
from rigside.core.signal.snippets import snippet_times_ms


@dataclass
class Footprint:
    """Mean waveform of one unit on the sites of its peak site's neighbourhood."""

    unit: int
    peak_channel: int          # the site where the mean waveform is largest (absolute value)
    channels: np.ndarray       # int64, the sites shown (the peak site's neighbourhood, sorted)
    mean_uv: np.ndarray        # float64 (samples, len(channels)), filtered microvolts
    times_ms: np.ndarray       # time of each sample from the peak (ms)
    n_events: int              # events averaged


def unit_footprint(recording, events, params: Params, sorting, unit: int, n_events: int = 200,
                   progress: ProgressFn = None, cancel: CancelFn = None) -> Footprint:
    """The footprint of ``unit`` on a probe recording.

    Parameters
    ----------
    recording
        The probe recording the events came from (with site positions).
    events, params, sorting
        The session's event table, parameters (filter, snippets, ``probe.radius_um``) and sorting.
    unit
        A unit of ``sorting`` with at least one event.
    n_events
        At most this many of its events are averaged (spread over the recording).

    Returns
    -------
    Footprint
    """
    if recording.positions is None:
        raise RigsideError("footprint recording must have site positions, got a recording without them")
    rows = sorting.events_of(unit)
    if not len(rows):
        raise RigsideError(f"footprint unit must have events, got unit {unit} with none")
    mean = mean_waveforms(recording, events, params, sorting, [unit], n_events, progress, cancel)[int(unit)]
    group = np.asarray(recording.groups[int(events.group[rows[0]])], dtype=np.int64)
    peak = int(group[int(np.argmax(np.abs(mean).max(axis=0)))])
    near = neighbourhoods(recording.positions, recording.shank, params.probe.radius_um).of(peak)
    near = near[np.isin(near, group)]
    columns = np.array([int(np.flatnonzero(group == c)[0]) for c in near], dtype=np.int64)
    return Footprint(int(unit), peak, near, mean[:, columns], snippet_times_ms(params.snippets, events.rate_hz),
                     min(len(rows), int(n_events)))
