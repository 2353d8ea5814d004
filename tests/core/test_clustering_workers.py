"""First pass spread over worker processes, and the blockwise assignment of every event."""

import numpy as np
import pytest

import rigside.core.units.clustering as clustering
from rigside.core.progress import Cancelled
from rigside.core.units.clustering import ClusterParams, cluster_features, first_pass_assignments
from rigside.core.units.first_pass import first_pass

from .sorting_data import make_events


def test_same_seed_same_sorting_whatever_the_worker_count():
    events, x, names, truth = make_events(n=4000, n_groups=4, clusters=3, seed=11)
    p = ClusterParams(seed=3, fit_events=400)
    one = first_pass_assignments(events.group, events.artefact, x, events.amplitude_uv, p, workers=1)
    seen = []
    two = first_pass_assignments(events.group, events.artefact, x, events.amplitude_uv, p, workers=2,
                                 progress=lambda f, m: seen.append(f))
    np.testing.assert_array_equal(one[0], two[0])
    assert one[1] == two[1] and len(one[1]) >= 8
    assert seen[0] == 0.0 and seen[-1] == 1.0 and seen == sorted(seen)
    # the journaled step does not record the worker count: the same sorting either way
    s1, s2 = first_pass(events, x, p, feature_names=names), first_pass(events, x, p, feature_names=names, workers=2)
    np.testing.assert_array_equal(s1.assignments, s2.assignments)
    assert [e["op"] for e in s1.journal.entries] == [e["op"] for e in s2.journal.entries]


def test_cancel_with_workers_stops_before_clustering():
    events, x, names, truth = make_events(n=1500, n_groups=3, clusters=2, seed=8)
    with pytest.raises(Cancelled):
        first_pass_assignments(events.group, events.artefact, x, events.amplitude_uv, ClusterParams(),
                               workers=2, cancel=lambda: True)


def test_assignment_in_blocks_equals_one_block(monkeypatch):
    events, x, names, truth = make_events(n=5000, n_groups=1, clusters=4, seed=5)
    p = ClusterParams(fit_events=600, seed=2)
    whole = cluster_features(x, p)
    monkeypatch.setattr(clustering, "ASSIGN_BLOCK", 37)  # many blocks, the last one partial
    np.testing.assert_array_equal(cluster_features(x, p), whole)
    assert whole.max() + 1 == 4
