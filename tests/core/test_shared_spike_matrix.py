"""Matching of spike trains: the one-pass shared-spike matrix against a plain per-pair
reference (invented random trains; the reference is the earliest-first greedy matching written
out in plain Python, common practice, no source)."""

import numpy as np
import pytest

from rigside.core.quality.matching import jaccard, match_times, shared_spike_matrix


def greedy_count(a, b, tol):
    """Plain per-pair reference: walk both sorted trains, pair each spike of ``a`` with the
    earliest unused spike of ``b`` at or after ``a - tol`` if it is at or before ``a + tol``."""
    a, b = sorted(a), sorted(b)
    j = n = 0
    for x in a:
        while j < len(b) and b[j] < x - tol:
            j += 1
        if j < len(b) and b[j] <= x + tol:
            n += 1
            j += 1
    return n


def reference_matrix(ta, ua, tb, ub, tol):
    ids_a, ids_b = np.unique(ua), np.unique(ub)
    out = np.zeros((len(ids_a), len(ids_b)), dtype=np.int64)
    for i, u in enumerate(ids_a):
        for j, v in enumerate(ids_b):
            out[i, j] = greedy_count(ta[ua == u].tolist(), tb[ub == v].tolist(), tol)
    return ids_a, ids_b, out


def random_sorting(rng, n_units, n_spikes, span, grid):
    """Spikes on an integer grid (so distances equal to the tolerance occur exactly), with dense
    bursts: a third of the spikes packed into a few short windows."""
    t = rng.integers(0, span, n_spikes).astype(float)
    burst = rng.random(n_spikes) < 1 / 3
    t[burst] = rng.choice(rng.integers(0, span, 4), burst.sum()) + rng.integers(0, 6, burst.sum())
    return t * grid, rng.integers(0, n_units, n_spikes) * 10 + 3     # unit ids need not be 0..n-1


@pytest.mark.parametrize("seed", range(12))
def test_matrix_equals_per_pair_reference(seed):
    rng = np.random.default_rng(seed)
    tol = float(rng.integers(0, 4))
    ta, ua = random_sorting(rng, int(rng.integers(1, 7)), int(rng.integers(1, 400)), 300, 1.0)
    tb, ub = random_sorting(rng, int(rng.integers(1, 7)), int(rng.integers(1, 400)), 300, 1.0)
    ids_a, ids_b, m = shared_spike_matrix(ta, ua, tb, ub, tol)
    ref_a, ref_b, ref = reference_matrix(ta, ua, tb, ub, tol)
    np.testing.assert_array_equal(ids_a, ref_a)
    np.testing.assert_array_equal(ids_b, ref_b)
    np.testing.assert_array_equal(m, ref)
    for i, u in enumerate(ids_a):           # and the counts match_times defines, pair by pair
        for j, v in enumerate(ids_b):
            assert m[i, j] == len(match_times(np.sort(ta[ua == u]), np.sort(tb[ub == v]), tol)[0])


@pytest.mark.parametrize("seed", range(4))
def test_inputs_already_in_order_and_sparse_ids(seed):
    # both trains time-sorted: the merge skips its sorts; ids far apart (or not integers) take
    # the general id look-up
    rng = np.random.default_rng(100 + seed)
    ta, ua = random_sorting(rng, 6, 2000, 5000, 1.0)
    tb, ub = random_sorting(rng, 9, 2000, 5000, 1.0)
    oa, ob = np.argsort(ta, kind="stable"), np.argsort(tb, kind="stable")
    ta, ua, tb, ub = ta[oa], ua[oa], tb[ob], ub[ob]
    ref = reference_matrix(ta, ua, tb, ub, 2.0)[2]
    np.testing.assert_array_equal(shared_spike_matrix(ta, ua, tb, ub, 2.0)[2], ref)
    ids_a, ids_b, m = shared_spike_matrix(ta, ua * 10**12, tb, ub.astype(float) / 7, 2.0)
    np.testing.assert_array_equal(m, ref)
    np.testing.assert_array_equal(ids_a, np.unique(ua) * 10**12)


def test_seconds_with_ties_at_the_tolerance():
    rng = np.random.default_rng(7)
    tol = 0.0005
    ta, ua = random_sorting(rng, 5, 3000, 20000, tol / 2)    # times on a half-tolerance grid
    tb, ub = random_sorting(rng, 8, 3000, 20000, tol / 2)
    _, _, m = shared_spike_matrix(ta, ua, tb, ub, tol)
    assert m.sum() > 0
    np.testing.assert_array_equal(m, reference_matrix(ta, ua, tb, ub, tol)[2])


def test_one_to_one_conflicts_by_hand():
    # a = 0 takes b = 1 (earliest in reach), so a = 1 finds nothing left: 1 match, not 2
    assert shared_spike_matrix([0.0, 1.0], [0, 0], [1.0], [5], 1.0)[2].tolist() == [[1]]
    # three equal spikes against two: two pairs; a second B unit at the same time is matched too
    m = shared_spike_matrix([0.0, 0.0, 0.0], [1, 1, 1], [0.0, 0.0, 0.0], [2, 2, 4], 0.0)[2]
    assert m.tolist() == [[2, 1]]
    # distance exactly the tolerance matches; just beyond it does not
    assert shared_spike_matrix([2.0, 10.0], [0, 0], [4.0, 12.5], [0, 0], 2.0)[2].tolist() == [[1]]


def test_empty_and_unequal_inputs():
    ids_a, ids_b, m = shared_spike_matrix([], [], [1.0], [3], 0.5)
    assert len(ids_a) == 0 and ids_b.tolist() == [3] and m.shape == (0, 1)
    with pytest.raises(ValueError, match="equal lengths"):
        shared_spike_matrix([1.0, 2.0], [0], [1.0], [0], 0.5)


def test_jaccard_of_counts():
    # |A & B| / |A | B| (Jaccard 1912): 2 shared of 4 and 3 spikes -> 2 / 5
    np.testing.assert_allclose(jaccard(np.array([[2]]), np.array([4]), np.array([3])), [[0.4]])
