"""The first pass's fragment rule and split test on invented clusters with known membership."""

import numpy as np
import pytest
from scipy.stats import chi2
from sklearn.metrics import adjusted_rand_score

from rigside.core.params import ClusterParams
from rigside.core.units.em import fit_em
from rigside.core.units.operations import _cluster_params
from rigside.core.units.refine import absorb_fragments, gap_p_value, smallest_unit, split_clusters


def test_smallest_unit_is_the_larger_of_count_and_share():
    p = ClusterParams(min_unit_events=20, min_unit_share=0.02)
    assert smallest_unit(p, 500) == 20 and smallest_unit(p, 5000) == 100


def test_fragment_events_join_a_unit_only_within_the_chi_square_bound():
    rng = np.random.default_rng(0)
    big = rng.normal(size=(2000, 3))
    near = rng.normal(scale=0.3, size=(6, 3)) + [0.5, 0.0, 0.0]       # inside the big cluster's bulk
    far = rng.normal(scale=0.3, size=(6, 3)) + [30.0, 0.0, 0.0]       # nowhere near it
    z = np.vstack([big, near, far])
    labels = np.r_[np.zeros(2000, int), np.ones(6, int), np.full(6, 2)]
    mixture = fit_em(z, 3, random_state=0)
    merged = [[int(c)] for c in np.argsort(-mixture.weights_)]          # cluster 0 = the big component
    out = absorb_fragments(z, labels, mixture, merged, ClusterParams(min_unit_events=20, fragment_fit=0.99))
    # reference: the squared Mahalanobis distance to the big component against scipy's chi-square quantile
    big_c = merged[0][0]
    y = (z - mixture.means_[big_c]) @ mixture.precisions_cholesky_[big_c]
    inside = np.einsum("ij,ij->i", y, y) <= chi2.ppf(0.99, 3)
    assert np.all(out[:2000] == 0)
    np.testing.assert_array_equal(out[2000:] == 0, inside[2000:])
    assert np.all(out[2006:] == -1) and np.all(out[2000:2006] == 0)


def test_split_test_separates_two_units_merged_into_one_cluster():
    rng = np.random.default_rng(1)
    a = rng.normal(size=(600, 4)) + [4, 0, 0, 0]
    b = rng.normal(size=(600, 4)) - [4, 0, 0, 0]
    z = np.vstack([a, b])
    truth = np.r_[np.zeros(600, int), np.ones(600, int)]
    p = ClusterParams(min_unit_events=20, min_unit_share=0.02)
    out = split_clusters(z, np.zeros(len(z), np.int64), None, p, np.random.default_rng(0))
    assert len(np.unique(out)) == 2
    assert adjusted_rand_score(truth, out) > 0.99     # reference: scikit-learn's adjusted Rand index


def test_split_test_leaves_one_gaussian_whole():
    z = np.random.default_rng(2).normal(size=(1200, 4))
    out = split_clusters(z, np.zeros(len(z), np.int64), None, ClusterParams(), np.random.default_rng(0))
    assert np.all(out == 0)


def test_a_part_too_small_to_be_a_unit_goes_by_the_fragment_rule():
    rng = np.random.default_rng(3)
    a = rng.normal(size=(800, 3))
    b = rng.normal(size=(800, 3)) + [12.0, 0.0, 0.0]
    p = ClusterParams(min_unit_events=20, min_unit_share=0.0)
    labels = np.r_[np.zeros(800, int), np.ones(800, int), np.zeros(12, int)]   # 12 more events in A's cluster
    strays = rng.normal(scale=0.5, size=(12, 3)) + [12.0, 0.0, 0.0]      # B's events
    lost = rng.normal(scale=0.3, size=(12, 3)) + [0.0, 40.0, 0.0]        # near nothing
    for extra, goes_to in ((strays, 1), (lost, -1)):
        z = np.vstack([a, b, extra])
        out = split_clusters(z, labels, None, p, np.random.default_rng(0))
        assert np.all(out[:800] == 0) and np.all(out[800:1600] == 1)
        # reference: the chi-square bound (scipy) of B's own Gaussian
        y = np.linalg.solve(np.linalg.cholesky(np.cov(b, rowvar=False, ddof=0)), (extra - b.mean(axis=0)).T)
        inside = np.einsum("ij,ij->j", y, y) <= chi2.ppf(p.fragment_fit, 3)
        assert inside.all() == (goes_to == 1)
        assert np.all(out[1600:] == goes_to), (goes_to, out[1600:])
    # switched off (as journal records written before it replay): no such split
    off = split_clusters(np.vstack([a, b, strays]), labels, None, ClusterParams(min_unit_events=20, min_unit_share=0.0,
                                                                                split_fragments=False),
                         np.random.default_rng(0))
    assert np.array_equal(off, labels)
    assert not _cluster_params({"min_unit_events": 20}).split_fragments and ClusterParams().split_fragments
    old = _cluster_params({"min_unit_events": 20, "merge_overlap": 0.03})   # a record from before the gap test
    assert (old.split_gap_p, old.split_overlap) == (0.0, 0.03)


def _refractory_train(rng: np.random.Generator, n: int, seconds: float, dead_s: float = 0.0025) -> np.ndarray:
    """Poisson spike times with an absolute refractory period (exponential gaps plus ``dead_s``)."""
    gaps = dead_s + rng.exponential(seconds / n - dead_s, n)
    return np.cumsum(gaps)


def _brute_gap_p(a: np.ndarray, b: np.ndarray, p: ClusterParams) -> float:
    from scipy.stats import poisson

    lag = np.abs(b[None, :] - a[:, None])
    lo, hi = p.gap_censored_ms / 1e3, p.gap_refractory_ms / 1e3
    observed = int(((lag >= lo) & (lag < hi)).sum())
    expected = ((lag >= 0.005) & (lag < 0.025)).sum() * (hi - lo) / 0.02
    return float(poisson.cdf(observed, expected))


def test_two_parts_that_keep_one_refractory_period_are_not_split():
    rng = np.random.default_rng(4)
    z = np.vstack([rng.normal(size=(600, 4)) + [4, 0, 0, 0], rng.normal(size=(600, 4)) - [4, 0, 0, 0]])
    second = np.r_[np.zeros(600, bool), np.ones(600, bool)]
    p = ClusterParams(min_unit_events=20, min_unit_share=0.02)
    one = _refractory_train(rng, 1200, 60.0)                   # one neuron's spikes shared by the two blobs
    one_neuron = rng.permutation(one)                           # blob of each spike: at random
    two_neurons = np.r_[_refractory_train(rng, 600, 60.0), _refractory_train(rng, 600, 60.0)]
    for times, parts in ((one_neuron, 1), (two_neurons, 2)):
        # reference: brute-force pair counts and scipy's Poisson distribution
        expect = _brute_gap_p(np.sort(times[~second]), np.sort(times[second]), p)
        assert gap_p_value(times, second, p) == pytest.approx(expect, rel=1e-9)
        assert (expect < p.split_gap_p) == (parts == 1)
        out = split_clusters(z, np.zeros(len(z), np.int64), None, p, np.random.default_rng(0), times)
        assert len(np.unique(out)) == parts
