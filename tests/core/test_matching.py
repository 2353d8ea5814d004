"""Spike-train matching, agreement and ground-truth scoring against brute force.

Oracles: a plain O(n*m) python matcher (each spike of ``a`` in time order takes the earliest
still-free spike of ``b`` within the tolerance), scipy.sparse.csgraph.maximum_bipartite_matching
on the full O(n*m) "within tolerance" graph (greedy earliest-first matching of points on a line
is a maximum matching: common practice, no source), and the Jaccard index written out per pair.
"""

import numpy as np
import pytest
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import maximum_bipartite_matching

from rigside.core.events import EventTable
from rigside.core.quality.matching import jaccard, match_times, shared_spike_matrix
from rigside.core.synthetic.truth import Truth, score_curve


def brute_pairs(a, b, tol):
    """Each a (in order) takes the first free b within tol, scanning all of b."""
    used = [False] * len(b)
    pairs = []
    for i, x in enumerate(a):
        for j, y in enumerate(b):
            if not used[j] and abs(x - y) <= tol:
                used[j] = True
                pairs.append((i, j))
                break
    return pairs


def maximum_matching(a, b, tol) -> int:
    """Size of a maximum one-to-one matching (scipy, on the dense within-tolerance graph)."""
    if len(a) == 0 or len(b) == 0:
        return 0
    graph = csr_matrix((np.abs(np.subtract.outer(a, b)) <= tol).astype(np.int8))
    return int(np.sum(maximum_bipartite_matching(graph, perm_type="column") >= 0))


def trains(rng, n_a, n_b, span, integer=False):
    """Train a, and train b: 60% of a jittered by up to 1, plus n_b spikes at random."""
    a = np.sort(rng.uniform(0, span, n_a))
    shared = a[rng.random(n_a) < 0.6]
    b = np.sort(np.concatenate([shared + rng.uniform(-1.0, 1.0, len(shared)), rng.uniform(0, span, n_b)]))
    return (np.round(a), np.round(b)) if integer else (a, b)


@pytest.mark.parametrize("seed", range(6))
def test_match_times_equals_brute_force_and_is_maximum(seed):
    rng = np.random.default_rng(seed)
    a, b = trains(rng, 60 + 10 * seed, 40, 300.0, integer=seed % 2 == 0)   # ties when integer
    for tol in (0.0, 0.5, 1.0, 3.0):
        ia, ib = match_times(a, b, tol)
        assert list(zip(ia.tolist(), ib.tolist())) == brute_pairs(a, b, tol)
        assert len(ia) == maximum_matching(a, b, tol)
        assert np.all(np.abs(a[ia] - b[ib]) <= tol) and len(set(ia)) == len(ia) == len(set(ib))


def test_match_times_edge_cases():
    assert [len(x) for x in match_times([], [1.0], 1.0)] == [0, 0]
    ia, ib = match_times([1.0, 1.0, 1.0], [0.0, 2.0], 1.0)       # three spikes compete for two
    assert ia.tolist() == [0, 1] and ib.tolist() == [0, 1]
    with pytest.raises(ValueError, match="must be sorted"):
        match_times([2.0, 1.0], [1.0], 0.5)


def test_shared_spike_matrix_and_jaccard_equal_brute_force():
    rng = np.random.default_rng(7)
    times_a, units_a = rng.uniform(0, 100, 300), rng.integers(1, 5, 300)
    times_b = np.concatenate([times_a[:200] + rng.uniform(-0.3, 0.3, 200), rng.uniform(0, 100, 80)])
    units_b = np.concatenate([units_a[:200] * 10, rng.integers(1, 4, 80) * 10])
    ids_a, ids_b, m = shared_spike_matrix(times_a, units_a, times_b, units_b, 0.25)
    assert ids_a.tolist() == [1, 2, 3, 4] and ids_b.tolist() == [10, 20, 30, 40]
    n_a = np.array([np.sum(units_a == u) for u in ids_a])
    n_b = np.array([np.sum(units_b == u) for u in ids_b])
    agree = jaccard(m, n_a, n_b)
    for i, ua in enumerate(ids_a):
        for j, ub in enumerate(ids_b):
            ta, tb = np.sort(times_a[units_a == ua]), np.sort(times_b[units_b == ub])
            want = len(brute_pairs(ta, tb, 0.25))
            assert m[i, j] == want
            assert agree[i, j] == pytest.approx(want / (len(ta) + len(tb) - want))
    assert np.all(np.diag(m) > 0)
    assert jaccard(np.zeros((1, 1)), np.zeros(1), np.zeros(1))[0, 0] == 0.0    # two empty units


def score_brute(events, truth, thresholds, tol_samples):
    """Per threshold: maximum matching, group by group, of non-artefact events at or above the
    threshold with the true spikes of the group's units."""
    out = []
    for k in thresholds:
        hits = misses = fas = 0
        for g in sorted(set(truth.unit_group.values()) | set(events.group.tolist())):
            mine = [u for u, gg in truth.unit_group.items() if gg == g]
            t_true = truth.sample[np.isin(truth.unit, mine)].astype(float)
            det = events.sample[(events.group == g) & ~events.artefact & (events.amplitude_sigma >= k)].astype(float)
            h = maximum_matching(det, t_true, tol_samples)
            hits, misses, fas = hits + h, misses + len(t_true) - h, fas + len(det) - h
        out.append((hits, misses, fas))
    return np.array(out).T


def test_score_curve_equals_brute_force():
    rng = np.random.default_rng(3)
    rate, n_samples = 30000.0, 300000
    unit_group = {0: 0, 1: 0, 2: 1, 3: 2}
    true_sample = np.sort(rng.choice(n_samples, 240, replace=False))
    true_unit = rng.integers(0, 4, 240).astype(np.int32)
    # events: most true spikes found within a few samples, in their unit's group, plus noise
    found = rng.random(240) < 0.8
    ev_sample = np.concatenate([true_sample[found] + rng.integers(-20, 21, found.sum()),
                                rng.integers(0, n_samples, 150)])
    ev_group = np.concatenate([[unit_group[int(u)] for u in true_unit[found]], rng.integers(0, 4, 150)])
    order = np.argsort(ev_sample, kind="stable")
    n = len(ev_sample)
    events = EventTable(ev_sample[order], np.zeros(n), ev_group[order], -rng.uniform(40, 200, n),
                        rng.uniform(3, 15, n), rng.random(n) < 0.05, rate, n_samples, np.full(1, 10.0), 3.0)
    truth = Truth(true_sample, true_unit, unit_group, {u: 0 for u in unit_group},
                  {u: 100.0 for u in unit_group}, {u: "regular" for u in unit_group})
    k = np.array([3.0, 4.5, 6.0, 9.0, 14.0])
    got = score_curve(events, truth, k, tolerance_ms=0.5)
    hits, misses, fas = score_brute(events, truth, k, 0.5 * rate / 1000)
    assert got.hits.tolist() == hits.tolist()
    assert got.misses.tolist() == misses.tolist()
    assert got.false_alarms.tolist() == fas.tolist()
    assert hits[0] > 100 and fas[0] > 50          # the data exercise both kinds of count
