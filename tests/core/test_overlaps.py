"""The overlap pass of sort against ground truth, its journaled step, sessions with recovered events,
and per-channel thresholds through a whole sort, a saved session and clustering."""

import numpy as np
import pytest
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import maximum_bipartite_matching

from rigside.core.events import EventTable
from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.runs.sort import run_sort
from rigside.core.signal.pipeline import thresholds_sigma
from rigside.core.synthetic.synth import write_synth
from rigside.core.synthetic.truth import load_truth
from rigside.core.units.assign_events import AssignEvents
from rigside.core.units.event_rows import MISSING, detection_at, session_rows
from rigside.core.units.first_pass import first_pass
from rigside.core.units.history import rebuild_history, replay_matches
from rigside.core.units.operations import operation_from_record
from rigside.core.units.session import load_session
from rigside.core.units.sorting import NO_UNIT

RAISED = (0, 5, 9)       # channels detected at 5.25 sigma instead of 4.5: thresholds set per channel


@pytest.fixture(scope="module")
def sorted_demo(tmp_path_factory):
    d = tmp_path_factory.mktemp("overlaps")
    write_synth(d / "demo.bin", seconds=8, channels=16, seed=1)
    rec = open_recording(d / "demo.bin")
    params = Params()
    per = np.full(rec.n_channels, 4.5)
    per[list(RAISED)] = 5.25
    params.detect.channel_thresholds_sigma = per.tolist()
    # 8 s only: a unit firing at 2 Hz has 16 events, under the default smallest unit (20 events), and its
    # events would be unassigned, with no mean waveform to subtract
    params.cluster.min_unit_events = 5
    session, _ = run_sort(rec, params, d / "demo.h5")
    return rec, load_truth(rec.truth_path()), session, d / "demo.h5"


def _found(truth, truth_group, events, keep, tol):
    """Truth spikes paired one-to-one with events of their group within ``tol`` samples (reference:
    scipy's maximum bipartite matching on the graph of pairs within the tolerance)."""
    hit = np.zeros(len(truth.sample), bool)
    for g in np.unique(truth_group):
        i = np.flatnonzero(truth_group == g)
        j = np.flatnonzero(keep & (events.group == g))
        close = np.abs(truth.sample[i][:, None] - events.sample[j][None, :]) <= tol
        match = maximum_bipartite_matching(csr_matrix(close.astype(np.int8)), perm_type="column")
        hit[i[match >= 0]] = True
    return hit


def test_recovered_overlaps_halve_the_spikes_lost_to_same_bundle_overlaps(sorted_demo):
    rec, truth, session, _ = sorted_demo
    ev = session.events
    group = np.array([truth.unit_group[int(u)] for u in truth.unit])
    ms = rec.rate_hz / 1000
    # overlapping: within 1 ms of a spike of another unit of the same group (brute force)
    near = (np.abs(truth.sample[:, None] - truth.sample[None, :]) <= ms) & (group[:, None] == group[None, :]) \
        & (truth.unit[:, None] != truth.unit[None, :])
    overlapping = near.any(axis=1)
    before = _found(truth, group, ev, ev.detected, 0.5 * ms)
    after = _found(truth, group, ev, np.ones(len(ev), bool), 0.5 * ms)
    lost_before, lost_after = int((~before[overlapping]).sum()), int((~after[overlapping]).sum())
    assert lost_before >= 20 and lost_after <= lost_before / 2
    n_recovered = int(ev.recovered.sum())
    assert int(after.sum() - before.sum()) >= 0.8 * n_recovered      # most finds are true spikes (86% here)


def test_no_recovered_event_repeats_a_spike_of_its_unit_or_an_event(sorted_demo):
    _, _, session, _ = sorted_demo
    ev, assign = session.events, session.sorting.assignments
    dead = round(session.params.detect.dead_time_ms * ev.rate_hz / 1000)
    assert ev.recovered.any() and np.all(assign[ev.recovered] != NO_UNIT)
    for u in np.unique(assign[assign != NO_UNIT]):
        rows = np.flatnonzero(assign == u)
        close = np.diff(ev.sample[rows]) <= dead
        assert not np.any(close & (ev.recovered[rows][1:] | ev.recovered[rows][:-1]))
    keys = ev.sample * ev.n_channels + ev.channel
    assert len(np.unique(keys)) == len(ev)
    found = ev.recovered
    assert np.all(ev.amplitude_sigma[found] >= thresholds_sigma(session.params, ev.sigma_uv)[ev.channel[found]])


def test_the_assignment_is_one_journaled_step_after_the_first_pass(sorted_demo):
    _, _, session, _ = sorted_demo
    sorting = session.sorting
    entries = sorting.journal.entries
    assert [e["op"]["op"] for e in entries] == ["cluster_groups", "assign_events"]
    assert replay_matches(sorting)         # the first pass on the joined events leaves recovered ones out
    twin = sorting.copy()
    steps = rebuild_history(twin)
    assert len(steps) == 1 and isinstance(steps[0], AssignEvents)
    steps[0].undo(twin)
    assert np.all(twin.assignments[session.events.recovered] == NO_UNIT)
    assert np.array_equal(twin.assignments, sorting.origin.assignments)
    again = operation_from_record(entries[1]["op"])
    again.do(twin)
    assert twin.state_equal(sorting)


def test_a_session_with_recovered_events_and_per_channel_thresholds_loads_and_clusters(sorted_demo):
    rec, _, session, path = sorted_demo
    loaded = load_session(path)
    ev = loaded.events
    np.testing.assert_array_equal(ev.recovered, session.events.recovered)
    assert loaded.sorting.state_equal(session.sorting)
    thr = thresholds_sigma(loaded.params, ev.sigma_uv)
    assert loaded.params.detect.channel_thresholds_sigma == session.params.detect.channel_thresholds_sigma
    assert np.all(ev.amplitude_sigma >= thr.astype(np.float32)[ev.channel])
    assert np.all(ev.amplitude_sigma[np.isin(ev.channel, RAISED)] >= 5.25 - 1e-6)
    # look-up counts hold detected events only; rows of a detection table miss just the recovered events
    detected = ev.subset(ev.detected)
    np.testing.assert_array_equal(ev.counts(threshold_sigma=thr), detected.counts(threshold_sigma=thr))
    rows = session_rows(loaded, detected)
    np.testing.assert_array_equal(rows == MISSING, ev.recovered)
    # clustering again at the stored per-channel thresholds: the detected events of the session
    features = type("F", (), {"values": np.asarray(loaded.sorting.data.features)[ev.detected],
                              "names": list(loaded.sorting.data.feature_names)})()
    det = detection_at(detected, features, loaded.params, thr)
    assert det.params.detect.channel_thresholds_sigma == thr.tolist() and len(det.rows) == len(detected)
    again = first_pass(det.events, det.features, loaded.params.cluster)
    # fragments' events may stay unassigned (the first pass's fragment rule); nearly all join units
    assert again.units and np.mean(again.assignments[~det.events.artefact] != NO_UNIT) > 0.9


def test_tables_without_recovered_events_store_no_such_column(tmp_path):
    table = EventTable(sample=[5, 9], channel=[0, 1], group=[0, 0], amplitude_uv=[-50.0, -60.0],
                       amplitude_sigma=[5.0, 6.0], artefact=[False, False], rate_hz=30000.0, n_samples=100,
                       sigma_uv=[10.0, 10.0], floor_sigma=4.0)
    table.write_h5(tmp_path / "a.h5")
    back = EventTable.read_h5(tmp_path / "a.h5")
    assert back.recovered is None and back.columns == table.columns and back.detected.all()
    flagged = EventTable(**{c: getattr(table, c) for c in table.columns}, recovered=[False, True],
                         rate_hz=30000.0, n_samples=100, sigma_uv=[10.0, 10.0], floor_sigma=4.0)
    flagged.write_h5(tmp_path / "b.h5")
    np.testing.assert_array_equal(EventTable.read_h5(tmp_path / "b.h5").recovered, [False, True])
    assert list(flagged.counts(threshold_sigma=4.5)) == [1, 0]
