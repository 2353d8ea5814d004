"""Undo history rebuilt from a journal: every step undoes to the recorded state, bit for bit."""

from __future__ import annotations

import numpy as np

from rigside.core.units.first_pass import first_pass
from rigside.core.units.history import UndoStack, rebuild_history
from rigside.core.units.journal import Journal
from rigside.core.units.operations import MergeUnits, MoveEvents, Relabel
from rigside.core.units.sorting import Sorting

from .sorting_data import make_events


def test_rebuilt_steps_undo_the_reloaded_sorting_through_every_earlier_state():
    events, x, names, _ = make_events(n=3000, n_groups=2, clusters=3, seed=4)
    s = first_pass(events, x, seed=1, feature_names=names)
    stack = UndoStack(s)
    states = [s.copy()]
    g0 = sorted(u for u, rec in s.units.items() if rec.group == 0)
    for op in (Relabel([g0[0]], "single unit"), MoveEvents(s.events_of(g0[0])[:25], g0[1]),
               MergeUnits(g0[:2]), Relabel([g0[-1]], "multi-unit")):
        stack.push(op)
        states.append(s.copy())
    stack.undo()                      # the last step was undone before saving
    states.pop()
    # what a reopened session holds: the final state and its journal, no operation objects
    loaded = Sorting(s.data, s.assignments.copy(), s.units, s.next_id, Journal(s.journal.entries))
    history = rebuild_history(loaded)
    assert [op.text for op in history] == [op.text for op in stack._done]
    for op, state in zip(reversed(history), reversed(states[:-1])):
        op.undo(loaded)
        assert loaded.state_equal(state)
        assert loaded.assignments.tobytes() == state.assignments.tobytes()


def test_a_journal_that_does_not_replay_to_the_sorting_gives_no_history():
    events, x, names, _ = make_events(n=2000, n_groups=1, clusters=2, seed=5)
    s = first_pass(events, x, seed=1, feature_names=names)
    assign = s.assignments.copy()
    assign[:3] = -1                   # units changed outside the journal
    other = Sorting(s.data, assign, s.units, s.next_id, Journal(s.journal.entries))
    assert rebuild_history(other) is None
    assert rebuild_history(s) == []   # only the opening first pass: nothing to undo
    assert np.array_equal(s.assignments, first_pass(events, x, seed=1, feature_names=names).assignments)
