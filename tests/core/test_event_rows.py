"""A session's events as rows of the window's one event table, and the events at a threshold cut out of it.

Oracle: a brute-force dictionary from (sample, channel) to row, built row by row (common practice, no source:
an event is identified in a recording by its sample and channel)."""

import numpy as np
import pytest

from rigside.core.errors import RigsideError
from rigside.core.events import EventTable
from rigside.core.params import Params
from rigside.core.signal.features import Features
from rigside.core.units.event_rows import MISSING, detection_at, session_rows
from rigside.core.units.first_pass import first_pass
from rigside.core.units.session import RecordingRef, Session


def _table(n: int = 1500, n_samples: int = 300_000, seed: int = 4) -> EventTable:
    """Events on 8 channels in 2 groups, several channels often at one sample, amplitudes 3 to 10 sigma."""
    rng = np.random.default_rng(seed)
    sample = rng.integers(0, n_samples // 40, n) * 40        # many events share a sample
    channel = rng.integers(0, 8, n)
    _, first = np.unique(sample * 8 + channel, return_index=True)   # one event per sample and channel
    order = np.lexsort((channel[first], sample[first]))
    sample, channel = sample[first][order], channel[first][order]
    m = len(sample)
    return EventTable(sample=sample, channel=channel, group=channel // 4, amplitude_uv=-rng.uniform(30, 100, m),
                      amplitude_sigma=rng.uniform(3.0, 10.0, m), artefact=rng.random(m) < 0.02, rate_hz=30000.0,
                      n_samples=n_samples, sigma_uv=np.full(8, 10.0), floor_sigma=3.0)


def _brute_rows(events: EventTable, table: EventTable) -> np.ndarray:
    where = {}
    for i in range(len(table)):
        where[(int(table.sample[i]), int(table.channel[i]))] = i
    return np.array([where.get((int(s), int(c)), MISSING) for s, c in zip(events.sample, events.channel)])


def _session(table: EventTable, features: Features) -> Session:
    sorting = first_pass(table, features.values, seed=0, feature_names=features.names)
    return Session(RecordingRef("rec.bin", 0, ""), Params(), table, sorting)


@pytest.fixture(scope="module")
def made():
    table = _table()
    features = Features(np.random.default_rng(1).normal(size=(len(table), 3)).astype(np.float32), ["a", "b", "c"])
    detection = detection_at(table, features, Params(), np.full(8, 5.0))
    return table, features, detection, _session(detection.events, detection.features)


def test_events_at_a_threshold_are_the_rows_at_or_above_it_with_artefacts(made):
    table, features, detection, _ = made
    expected = np.array([i for i in range(len(table)) if table.amplitude_sigma[i] >= np.float32(5.0)])
    assert 0 < len(expected) < len(table) and table.artefact[expected].any()
    np.testing.assert_array_equal(detection.rows, expected)
    np.testing.assert_array_equal(detection.events.sample, table.sample[expected])
    np.testing.assert_array_equal(detection.events.channel, table.channel[expected])
    np.testing.assert_array_equal(detection.features.values, features.values[expected])
    assert detection.params.detect.threshold_sigma == 5.0


def test_session_rows_find_each_event_in_the_table(made):
    table, _, detection, session = made
    rows = session_rows(session, table)
    np.testing.assert_array_equal(rows, _brute_rows(session.events, table))
    np.testing.assert_array_equal(rows, detection.rows)


def test_session_rows_mark_events_the_table_does_not_hold(made):
    table, _, _, session = made
    fewer = table.subset(np.random.default_rng(2).random(len(table)) < 0.7)
    rows = session_rows(session, fewer)
    expected = _brute_rows(session.events, fewer)
    assert (expected == MISSING).any() and (expected != MISSING).any()
    np.testing.assert_array_equal(rows, expected)
    other = _table(n_samples=400_000)                 # another recording's table: no rows at all
    assert np.all(session_rows(session, other) == MISSING)
    empty = table.subset(np.zeros(len(table), dtype=bool))
    assert np.all(session_rows(session, empty) == MISSING)


def test_a_session_of_the_table_itself_holds_every_row(made):
    table, features, _, _ = made
    session = _session(table, features)
    np.testing.assert_array_equal(session_rows(session, table), np.arange(len(table)))


def test_no_event_at_the_threshold_is_refused_and_thresholds_per_channel_are_kept(made):
    table, features, _, _ = made
    with pytest.raises(RigsideError, match="events at the current threshold, got none"):
        detection_at(table, features, Params(), np.full(8, 50.0))
    thresholds = np.array([5.0, 6.0] * 4)
    det = detection_at(table, features, Params(), thresholds)
    assert det.params.detect.channel_thresholds_sigma == thresholds.tolist()
    want = table.amplitude_sigma >= thresholds.astype(np.float32)[table.channel]   # numpy reference
    np.testing.assert_array_equal(det.rows, np.flatnonzero(want))
