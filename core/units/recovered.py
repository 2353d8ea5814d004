"""Events recovered by the overlap pass joined to a sorting's events, features and units.

The detected events keep their order, features and units; the recovered ones are placed among
them in time order, flagged in the table's ``recovered`` column, and given to the units whose
templates they match, and the detected events whose unit the pair fit changed move to it, by
one journaled step after the first pass
(:class:`rigside.core.units.assign_events.AssignEvents`). The state before that step stays the
first pass's result (``Sorting.origin``): clustering takes no recovered event, so replaying the
journal on the joined events gives the same sorting.
"""

from __future__ import annotations

import numpy as np

from rigside.core.errors import RigsideError
from rigside.core.events import COLUMNS, EventTable
from rigside.core.signal.features import Features
from rigside.core.signal.overlaps import Recovered
from rigside.core.units.assign_events import AssignEvents
from rigside.core.units.history import UndoStack
from rigside.core.units.sorting import NO_UNIT, Sorting, SortingData, SortingState


def with_recovered(events: EventTable, features: Features, sorting: Sorting,
                   found: Recovered) -> tuple[EventTable, Features, Sorting]:
    """The events, features and sorting with the recovered events joined.

    Parameters
    ----------
    events, features
        The detected events (no recovered ones yet, no positions) and their features.
    sorting
        Their first-pass sorting (its journal holds only the opening step).
    found
        What :func:`rigside.core.signal.overlaps.recover_overlaps` found.

    Returns
    -------
    events, features, sorting
        The joined table (``recovered`` set), its features, and a sorting whose journal is the
        first pass then, when anything was found, the assignment of the recovered events.
    """
    if events.x_um is not None or events.recovered is not None or len(sorting.journal) != 1:
        raise RigsideError("recovered events join a first pass of detected events without positions, got "
                           "a table with positions or recovered events, or a curated sorting")
    n, m = len(events), len(found.unit)

    def joined(c: str) -> np.ndarray:
        return np.concatenate([getattr(events, c), getattr(found.events, c)])

    order = np.lexsort((joined("group"), joined("sample")))      # stable: detected rows keep their order
    cols = {c: joined(c)[order] for c in COLUMNS}                # one column at a time: one copy of the table
    flag = np.r_[np.zeros(n, bool), np.ones(m, bool)]
    table = EventTable(**cols, recovered=flag[order], rate_hz=events.rate_hz,
                       n_samples=events.n_samples, sigma_uv=events.sigma_uv.copy(), floor_sigma=events.floor_sigma,
                       polarity=events.polarity, excluded=dict(events.excluded))
    table.check()
    values = np.concatenate([features.values, found.features.astype(np.float32)])[order]
    joined = Features(values, list(features.names), features.bases)
    row = np.empty(n + m, dtype=np.int64)
    row[order] = np.arange(n + m)                                 # new row of every old row, then of each find
    state = sorting.state()
    assignments = np.full(n + m, NO_UNIT, dtype=np.int32)
    assignments[row[:n]] = state.assignments
    data = SortingData.from_events(table, values, joined.names)
    out = Sorting.from_state(data, SortingState(assignments, dict(state.units), state.next_id), sorting.journal)
    out.origin = out.state()
    rows = np.r_[row[n:], row[found.moved]]
    units = np.r_[found.unit, found.moved_unit]
    moves = {int(u): np.sort(rows[units == u]) for u in np.unique(units)}
    if moves:
        UndoStack(out).push(AssignEvents(moves))
    return table, joined, out
