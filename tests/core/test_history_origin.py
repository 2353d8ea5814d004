"""The state after the first pass travels with a saved session, so reopening it rebuilds the undo
history without clustering again, to the same steps as a replay from scratch."""

from __future__ import annotations

import numpy as np
import pytest

from rigside.core.params import Params
from rigside.core.units.first_pass import first_pass
from rigside.core.units.history import UndoStack, rebuild_history
from rigside.core.units.journal import Journal
from rigside.core.units.operations import ClusterGroups, MergeUnits, MoveEvents, Relabel
from rigside.core.units.session import RecordingRef, Session, file_fingerprint, load_session, save_session
from rigside.core.units.sorting import Sorting

from .sorting_data import make_events


@pytest.fixture()
def curated(tmp_path):
    raw = tmp_path / "rec.bin"
    raw.write_bytes(np.random.default_rng(0).integers(0, 255, 1 << 16, dtype=np.uint8).tobytes())
    events, x, names, _ = make_events(n=2500, n_groups=2, clusters=3, seed=7)
    sorting = first_pass(events, x, seed=3, feature_names=names)
    after_first = sorting.copy()
    stack = UndoStack(sorting)
    states = [sorting.copy()]
    ids = sorting.unit_ids()
    for op in (MergeUnits(ids[:2]), Relabel([ids[0]], "single unit"), MoveEvents(sorting.events_of(ids[2])[:30], None)):
        stack.push(op)
        states.append(sorting.copy())
    ref = RecordingRef(str(raw), raw.stat().st_size, file_fingerprint(raw), {"channels": 8})
    path = save_session(tmp_path / "s.h5", Session(ref, Params(), events, sorting))
    return path, after_first, states, stack


def test_the_first_pass_state_is_saved_and_read_back(curated):
    path, after_first, _, _ = curated
    loaded = load_session(path).sorting
    assert loaded.origin is not None
    assert np.array_equal(loaded.origin.assignments, after_first.assignments)
    assert loaded.origin.units == after_first.units and loaded.origin.next_id == after_first.next_id


def test_reopened_history_needs_no_clustering_and_undoes_to_every_state(curated, monkeypatch):
    path, _, states, stack = curated
    loaded = load_session(path).sorting

    def refuse(self, sorting):
        raise AssertionError("the first pass must not run again")

    monkeypatch.setattr(ClusterGroups, "do", refuse)
    history = rebuild_history(loaded)
    assert [op.text for op in history] == [op.text for op in stack._done]
    for op, state in zip(reversed(history), reversed(states[:-1])):
        op.undo(loaded)
        assert loaded.state_equal(state)


def test_without_the_first_pass_state_the_journal_is_replayed_from_scratch(curated):
    path, _, _, stack = curated
    s = load_session(path).sorting
    bare = Sorting(s.data, s.assignments.copy(), s.units, s.next_id, Journal(s.journal.entries))
    assert bare.origin is None
    assert [op.text for op in rebuild_history(bare)] == [op.text for op in stack._done]


def test_a_wrong_first_pass_state_gives_no_history_rather_than_a_wrong_one(curated):
    path, _, _, _ = curated
    s = load_session(path).sorting
    o = s.origin
    shifted = o.assignments.copy()
    first = int(np.flatnonzero(shifted >= 0)[0])
    shifted[first] = -1
    s.origin = type(o)(shifted, o.units, o.next_id)
    assert rebuild_history(s) is None
