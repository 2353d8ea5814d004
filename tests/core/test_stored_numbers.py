"""Quality numbers stored in the session: taken back on opening exactly as computed, recomputed for the
units that changed, and none taken from sessions saved without them or at other settings. The reference
is a fresh computation of the whole table (unit_metrics_for_events) on the reopened session."""

import h5py
import numpy as np
import pytest

from rigside.core.params import Params
from rigside.core.quality.stored_numbers import (
    compute_numbers,
    current_numbers,
    numbers_to_store,
    table_rows,
)
from rigside.core.units.first_pass import first_pass
from rigside.core.units.history import UndoStack
from rigside.core.units.operations import MergeUnits, SetNote
from rigside.core.units.session import RecordingRef, Session, file_fingerprint, load_session, save_session

from .sorting_data import make_events


def _saved(d, positions: bool):
    raw = d / "rec.bin"
    raw.write_bytes(np.random.default_rng(0).integers(0, 255, 1 << 16, dtype=np.uint8).tobytes())
    events, x, _, _ = make_events(n=1500, n_groups=2, clusters=3, seed=5)
    if positions:  # a probe's events carry positions: the table gains the position and drift columns
        rng = np.random.default_rng(2)
        events.x_um = rng.uniform(0, 40, len(events)).astype(np.float32)
        events.y_um = rng.uniform(0, 600, len(events)).astype(np.float32)
    names = [f"PC{i + 1}" for i in range(x.shape[1])]
    sorting = first_pass(events, x, seed=1, feature_names=names)
    ref = RecordingRef(str(raw), raw.stat().st_size, file_fingerprint(raw), {"channels": 8})
    session = Session(ref, Params(), events, sorting)
    session.unit_numbers = numbers_to_store(session, table_rows(compute_numbers(session)))
    return save_session(d / "s.h5", session)


@pytest.fixture(scope="module")
def saved(tmp_path_factory):
    """A session with two groups, saved with its quality numbers."""
    return _saved(tmp_path_factory.mktemp("numbers"), positions=False)


def _same(a: dict, b: dict) -> bool:
    """Rows equal column by column, NaN equal to NaN (numbers bit for bit)."""
    return a.keys() == b.keys() and all(
        (isinstance(a[c], str) and a[c] == b[c]) or (not isinstance(a[c], str) and np.array_equal(
            np.asarray(a[c]), np.asarray(b[c]), equal_nan=np.asarray(a[c]).dtype.kind == "f")) for c in a)


def test_stored_numbers_come_back_equal_to_a_fresh_computation(saved):
    s = load_session(saved)
    rows, stale = current_numbers(s)
    assert stale == [] and sorted(rows) == s.sorting.unit_ids()
    fresh = table_rows(compute_numbers(s))
    assert all(_same(rows[u], fresh[u]) for u in fresh)
    assert all(type(rows[u][c]) is type(fresh[u][c]) for u in fresh for c in fresh[u])


def test_a_probe_session_keeps_its_position_columns(tmp_path):
    s = load_session(_saved(tmp_path, positions=True))
    rows, stale = current_numbers(s)
    fresh = table_rows(compute_numbers(s))
    assert stale == [] and all("y_um" in r and "drift_um_per_min" in r for r in rows.values())
    assert all(_same(rows[u], fresh[u]) for u in fresh)


def test_a_changed_unit_is_recomputed_and_only_it(saved, tmp_path):
    s = load_session(saved)
    ids = s.sorting.unit_ids()
    stack = UndoStack(s.sorting)
    stack.push(MergeUnits(ids[:2]))
    stack.push(SetNote(ids[3], "a note changes no number"))
    rows, stale = current_numbers(s)
    merged = [u for u in s.sorting.unit_ids() if u not in ids[2:]]
    assert stale == merged and sorted(rows) == ids[2:]
    rows.update(table_rows(compute_numbers(s, only_units=stale)))
    fresh = table_rows(compute_numbers(s))
    assert sorted(rows) == sorted(fresh) and all(_same(rows[u], fresh[u]) for u in fresh)
    s.unit_numbers = numbers_to_store(s, rows)                  # saved again: every unit current
    again = load_session(save_session(tmp_path / "again.h5", s))
    assert current_numbers(again)[1] == []


def test_no_numbers_are_taken_at_other_metric_settings(saved, tmp_path):
    s = load_session(saved)
    s.params.metrics.refractory_ms = 2.0
    assert current_numbers(s) == ({}, s.sorting.unit_ids())


def test_a_session_saved_without_numbers_opens_and_computes_all(saved, tmp_path):
    s = load_session(saved)
    s.unit_numbers = None
    old = save_session(tmp_path / "old.h5", s)
    with h5py.File(old, "r") as f:
        assert "unit_numbers" not in f
    back = load_session(old)
    assert back.unit_numbers is None and current_numbers(back) == ({}, back.sorting.unit_ids())
