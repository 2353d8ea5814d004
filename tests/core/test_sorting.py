import gc

import numpy as np
import pytest

from rigside.core.errors import CurationError, RigsideError
from rigside.core.units.clustering import ClusterParams
from rigside.core.units.first_pass import first_pass
from rigside.core.units.history import UndoStack, replay
from rigside.core.units.journal import Journal
from rigside.core.units.operation_base import decode_indices, encode_indices
from rigside.core.units.operations import (
    ClusterGroups,
    MergeUnits,
    MoveEvents,
    ReclusterUnit,
    Relabel,
    SetNote,
    SplitByPolygon,
    operation_from_record,
)
from rigside.core.units.polygon import points_in_polygon
from rigside.core.units.sorting import AXIS_AMPLITUDE, AXIS_TIME, NO_UNIT, Sorting, Unit, pool_group, pool_id

from .sorting_data import make_events


@pytest.fixture(scope="module")
def base():
    events, x, names, truth = make_events(n=6000, n_groups=2, clusters=3, seed=21)
    return events, x, names, truth, first_pass(events, x, seed=1, feature_names=names)


def fresh(base) -> tuple[Sorting, UndoStack]:
    """A copy of the first-pass sorting (same data, journal restarted from its first entry)."""
    events, x, names, truth, s0 = base
    s = Sorting(s0.data, s0.assignments, s0.units, s0.next_id, Journal(s0.journal.entries))
    return s, UndoStack(s)


def snapshot(s: Sorting):
    return s.assignments.copy(), s.units, s.next_id


def same(s: Sorting, snap) -> bool:
    a, units, next_id = snap
    return (s.assignments.dtype == np.int32 and s.assignments.tobytes() == a.tobytes()
            and s.units == units and s.next_id == next_id)


def unit_of_cluster(base, s, cluster) -> int:
    events, x, names, truth, _ = base
    ids, counts = np.unique(s.assignments[truth == cluster], return_counts=True)
    return int(ids[np.argmax(counts)])


def operations(base, s):
    """One instance of every operation, valid on the first-pass sorting."""
    u0, u1, u2 = (unit_of_cluster(base, s, c) for c in (0, 1, 2))
    other_group = unit_of_cluster(base, s, 3)
    idx = s.events_of(u0)
    x = s.data.axis_values("feature:f0", idx)
    lo, hi = np.percentile(x, [20, 60])
    t = s.data.axis_values(AXIS_TIME, idx)
    return [
        SplitByPolygon(u0, "feature:f0", AXIS_TIME, [[lo, -1], [hi, -1], [hi, t.max() + 1], [lo, t.max() + 1]]),
        MergeUnits([u1, u2]),
        MoveEvents(s.events_of(u1)[::7], u0),
        MoveEvents(s.events_of(u1)[:50], None),
        MoveEvents(s.events_of(u2)[:30], NO_UNIT),
        ReclusterUnit(u0, k=3, params=ClusterParams(seed=3)),
        Relabel([u0, other_group], "single unit"),
        SetNote(u1, "two peaks; check drift"),
        ClusterGroups(ClusterParams(k=2, seed=5), groups=[1]),
        ClusterGroups(ClusterParams(seed=9)),
    ]


def test_every_operation_undo_and_redo_are_exact(base):
    s, stack = fresh(base)
    n_ops = len(operations(base, s))
    for i in range(n_ops):
        s, stack = fresh(base)
        op = operations(base, s)[i]
        before = snapshot(s)
        stack.push(op)
        after = snapshot(s)
        assert not same(s, before), op.text
        stack.undo()
        assert same(s, before), op.text
        stack.redo()
        assert same(s, after), op.text
        stack.undo()
        assert same(s, before), op.text
        s.validate()


def test_a_chain_of_operations_undoes_back_to_the_start_and_replays(base):
    s, stack = fresh(base)
    u0, u1, u2 = (unit_of_cluster(base, s, c) for c in (0, 1, 2))
    chain = [
        lambda: operations(base, s)[0],
        lambda: Relabel([u0, u1], "multi-unit"),
        lambda: MoveEvents(s.events_of(u1)[::5], u0),
        lambda: MoveEvents(s.events_of(u2)[:40], None),
        lambda: ReclusterUnit(u0, k=2),
        lambda: MergeUnits([u1, u2]),
        lambda: SetNote(min(u1, u2), "merged"),
        lambda: MoveEvents(s.events_of(min(u1, u2))[:10], NO_UNIT),
    ]
    start = snapshot(s)
    states = [start]
    for make in chain:
        stack.push(make())
        states.append(snapshot(s))
    for k in range(8, 0, -1):
        assert same(s, states[k])
        stack.undo()
    assert same(s, start)
    for k in range(1, 5):
        stack.redo()
        assert same(s, states[k])
    stack.push(SetNote(s.unit_ids()[0], "after a branch"))
    # the journal holds the first pass, eight steps, eight undos, four redos and the new step
    assert [e["action"] for e in s.journal.entries].count("undo") == 8
    replayed = replay(Journal.from_text(s.journal.to_text()).entries, Sorting(s.data))
    assert replayed.state_equal(s)
    assert replayed.assignments.tobytes() == s.assignments.tobytes()


def test_polygon_split_moves_exactly_the_points_inside(base):
    s, stack = fresh(base)
    u = unit_of_cluster(base, s, 1)
    idx = s.events_of(u)
    x = s.data.axis_values("feature:f1", idx)
    y = s.data.axis_values(AXIS_AMPLITUDE, idx)
    x0, x1 = np.percentile(x, [30, 90])
    y0, y1 = np.percentile(y, [10, 70])
    # a rectangle drawn as a polygon: membership checked independently by coordinate ranges
    stack.push(SplitByPolygon(u, "feature:f1", AXIS_AMPLITUDE, [[x0, y0], [x1, y0], [x1, y1], [x0, y1]]))
    new = stack._done[-1].created[0]
    expected = idx[(x > x0) & (x < x1) & (y > y0) & (y < y1)]
    assert np.array_equal(s.events_of(new), expected)
    assert s.unit(new).label == "unreviewed" and s.unit(new).group == s.unit(u).group
    assert len(s.events_of(u)) == len(idx) - len(expected)


def test_points_in_polygon_against_shapes_known_by_hand():
    rng = np.random.default_rng(0)
    x, y = rng.uniform(-1, 3, 20000), rng.uniform(-1, 3, 20000)
    # L shape: the unit square [0,2]x[0,2] minus [1,2]x[1,2] (concave)
    inside = points_in_polygon(x, y, [[0, 0], [2, 0], [2, 1], [1, 1], [1, 2], [0, 2]])
    truth = (x > 0) & (x < 2) & (y > 0) & (y < 2) & ~((x > 1) & (y > 1))
    assert np.array_equal(inside, truth)
    # triangle below the line y = x inside the square [0, 2]^2
    tri = points_in_polygon(x, y, [[0, 0], [2, 0], [2, 2]])
    assert np.array_equal(tri, (x < 2) & (y > 0) & (y < x))
    # orientation does not matter
    assert np.array_equal(tri, points_in_polygon(x, y, [[2, 2], [2, 0], [0, 0]]))


def test_merge_rules_and_refusals(base):
    s, stack = fresh(base)
    u0, u1 = unit_of_cluster(base, s, 0), unit_of_cluster(base, s, 1)
    stack.push(Relabel([u0], "single unit"))
    stack.push(SetNote(u0, "a"))
    stack.push(SetNote(u1, "b"))
    n = len(s.events_of(u0)) + len(s.events_of(u1))
    stack.push(MergeUnits([u1, u0]))
    target = min(u0, u1)
    assert len(s.events_of(target)) == n and max(u0, u1) not in s.units
    assert s.unit(target).label == "unreviewed" and s.unit(target).note in ("a | b", "b | a")
    assert stack.undo_text == f"Merge units {min(u0, u1)}, {max(u0, u1)}"
    with pytest.raises(CurationError, match="one channel group"):
        MergeUnits([target, unit_of_cluster(base, s, 4)]).do(s)
    with pytest.raises(CurationError, match="at least two distinct units"):
        MergeUnits([target, target])
    with pytest.raises(CurationError, match="current units"):
        MergeUnits([target, 999]).do(s)


def test_move_refusals(base):
    s, stack = fresh(base)
    u0, other = unit_of_cluster(base, s, 0), unit_of_cluster(base, s, 3)
    with pytest.raises(CurationError, match="group"):
        MoveEvents(s.events_of(u0)[:5], other).do(s)
    mixed = np.concatenate([s.events_of(u0)[:2], s.events_of(other)[:2]])
    with pytest.raises(CurationError, match="one channel group"):
        MoveEvents(mixed, None).do(s)
    with pytest.raises(CurationError, match="already"):
        MoveEvents(s.events_of(u0)[:5], u0).do(s)
    with pytest.raises(CurationError, match="distinct indices"):
        MoveEvents([len(s.data) + 3], u0).do(s)


def test_recluster_recovers_a_merged_pair(base):
    events, x, names, truth, _ = base
    s, stack = fresh(base)
    u0, u1 = unit_of_cluster(base, s, 0), unit_of_cluster(base, s, 1)
    stack.push(MergeUnits([u0, u1]))
    merged = min(u0, u1)
    stack.push(ReclusterUnit(merged, k=2, params=ClusterParams(seed=2)))
    parts = [merged, *stack._done[-1].created]
    for cluster in (0, 1):
        members = truth == cluster
        best = max(np.mean(s.assignments[members] == p) for p in parts)
        assert best > 0.99


def test_relabel_and_note_touch_only_their_unit(base):
    s, stack = fresh(base)
    seen = []

    class View:
        def refresh(self, change):
            seen.append(change)

    view = View()
    s.changed.connect(view.refresh)
    u = s.unit_ids()[2]
    stack.push(Relabel([u], "multi-unit"))
    assert seen[-1].touched == {u} and seen[-1].edited == {u} and not seen[-1].members
    stack.push(SetNote(u, "noisy"))
    assert seen[-1].touched == {u}
    with pytest.raises(CurationError, match="differ"):
        Relabel([u], "multi-unit").do(s)
    with pytest.raises(CurationError, match="label must be one of"):
        Relabel([u], "good")
    with pytest.raises(CurationError, match="label must be one of"):
        Unit(group=0, label="noise")
    # the emitter holds its callbacks weakly
    del view
    gc.collect()
    stack.push(SetNote(u, "gone"))
    assert len(seen) == 2


def test_journal_replay_refuses_inconsistent_entries(base):
    s, stack = fresh(base)
    u0, u1 = unit_of_cluster(base, s, 0), unit_of_cluster(base, s, 1)
    stack.push(MergeUnits([u0, u1]))
    stack.push(SetNote(min(u0, u1), "x"))
    stack.undo()
    entries = Journal.from_text(s.journal.to_text()).entries
    bad = [dict(e) for e in entries]
    bad[-1]["ref"] = 1
    with pytest.raises(CurationError, match="must undo the last done step"):
        replay(bad, Sorting(s.data))
    bad = [dict(e) for e in entries]
    bad[0] = {**bad[0], "op": {**bad[0]["op"], "created": [100, 101]}}
    with pytest.raises(CurationError, match="must create units"):
        replay(bad, Sorting(s.data))
    with pytest.raises(CurationError, match="numbered 0"):
        Journal.from_text('{"seq": 5, "action": "do", "op": {}}\n')
    with pytest.raises(CurationError, match="must be JSON"):
        Journal.from_text("{nope\n")


@pytest.mark.parametrize("record, message", [
    ({"op": "explode"}, "must name one of the operations"),
    ("merge", "must name one of the operations"),
    ({"op": "merge"}, "exactly its parameters"),
    ({"op": "merge", "units": [1, 2], "extra": 1}, "exactly its parameters"),
    ({"op": "merge", "units": ["1", 2]}, "must be an integer"),
    ({"op": "note", "unit": 1, "note": 5}, "note must be text"),
    ({"op": "split_polygon", "unit": 1, "x_axis": "a", "y_axis": "b", "vertices": [[0, 0], [1, "x"]]},
     "polygon"),
    ({"op": "cluster_groups", "params": {"k": -1}, "groups": None}, "forced cluster count"),
    ({"op": "cluster_groups", "params": {}, "groups": None, "progress": "x"}, "exactly its parameters"),
    ({"op": "move_events", "events": 12, "target": None}, "encoded text"),
])
def test_hostile_records_are_refused(base, record, message):
    s, stack = fresh(base)
    with pytest.raises(RigsideError, match=message):
        operation_from_record(record).do(s)


def test_event_list_encoding_round_trip_and_refusals():
    idx = np.array([0, 3, 4, 100, 99999], dtype=np.int64)
    assert np.array_equal(decode_indices(encode_indices(idx), 100000), idx)
    with pytest.raises(CurationError, match="at most 10 events"):
        decode_indices(encode_indices(np.arange(50)), 10)
    with pytest.raises(CurationError, match="distinct indices"):
        decode_indices(encode_indices(np.array([5, 3])), 10)
    with pytest.raises(CurationError, match="base64"):
        decode_indices("!!!not base64", 10)


def test_operation_texts(base):
    s, _ = fresh(base)
    texts = [op.text for op in operations(base, s)]
    assert texts[1].startswith("Merge units ")
    assert "Split unit" in texts[0] and "new unit" in texts[3] and "no unit" in texts[4]
    assert texts[-1] == "First-pass clustering" and texts[-2] == "Recluster group 1 into 2"


def test_a_prepared_step_is_recomputed_if_the_sorting_changed_meanwhile(base):
    s, stack = fresh(base)
    u = unit_of_cluster(base, s, 0)
    split = MoveEvents(s.events_of(u)[:10], None)
    assert split.prepare(s).created == (s.next_id,)      # e.g. prepared on a worker thread
    stack.push(MoveEvents(s.events_of(u)[10:20], None))  # another step lands first
    stack.push(split)
    assert split.created == (s.next_id - 1,) and len(s.events_of(split.created[0])) == 10
    stack.undo()
    stack.undo()
    assert same(s, snapshot(fresh(base)[0]))


def test_steps_applied_out_of_order_are_refused(base):
    s, stack = fresh(base)
    u0, u1 = unit_of_cluster(base, s, 0), unit_of_cluster(base, s, 1)
    first, second = MoveEvents(s.events_of(u0)[:5], None), MoveEvents(s.events_of(u1)[:5], None)
    stack.apply(first)
    stack.apply(second)
    before = snapshot(s)
    with pytest.raises(CurationError, match="state the step was computed for"):
        first.undo(s)                      # the later step must be undone first
    assert same(s, before)


def test_groups_of_agrees_with_a_dictionary_on_both_paths():
    from rigside.core.units.sorting import groups_of

    rng = np.random.default_rng(4)
    for top in (300, 2**31 - 3):          # a look-up table, then a binary search
        ids = np.unique(np.r_[rng.integers(1, 300, 40), top]).astype(np.int64)
        groups = rng.integers(0, 16, len(ids))
        values = np.r_[rng.choice(ids, 500), rng.integers(-5, 400, 200), [top, -1]]
        values = values.astype(np.int32 if top < 2**30 else np.int64)
        group = dict(zip(ids.tolist(), groups.tolist()))  # common practice, no source: a plain mapping
        group[-1] = -1
        got = groups_of(values, ids, groups)
        assert got.dtype == np.int32 and got.tolist() == [group.get(int(v), -2) for v in values]
    assert groups_of(np.array([1, -1, 2]), np.zeros(0, np.int64), np.zeros(0, np.int64)).tolist() == [-2, -1, -2]
    assert groups_of(np.array([-7, 1]), np.array([1]), np.array([3])).tolist() == [-2, 3]


def test_unassigned_pools_follow_moves_into_and_out_of_no_unit(base):
    s, stack = fresh(base)
    data = s.data

    def by_hand(g):     # events of group g in no unit, artefacts excluded
        return np.flatnonzero((s.assignments == NO_UNIT) & (data.group == g) & ~data.artefact)

    assert [pool_group(pool_id(g)) for g in range(3)] == [0, 1, 2] and pool_group(NO_UNIT) is None
    assert pool_group(1) is None
    unit = s.unit_ids()[0]
    g = s.unit(unit).group
    before = s.events_of(pool_id(g)).copy()         # cached from here on
    assert np.array_equal(before, by_hand(g)) and s.group_of(pool_id(g)) == g == s.group_of(unit)
    out = s.events_of(unit)[:7]
    stack.push(MoveEvents(out, NO_UNIT))
    assert np.array_equal(s.events_of(pool_id(g)), np.union1d(before, out))
    assert s.pool_counts()[g] == len(before) + 7
    stack.undo()
    assert np.array_equal(s.events_of(pool_id(g)), before)
    assert s.pool_counts().get(g, 0) == len(before)
    assert not np.any(data.artefact[s.events_of(pool_id(g))])
