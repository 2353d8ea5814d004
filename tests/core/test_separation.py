"""Isolation distance and L-ratio against CHECKS.md section 5 and a scipy reference route."""

import math

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.distance import cdist

from rigside.core.errors import RigsideError
from rigside.core.quality.metrics import cluster_separation, isolation_distance, l_ratio


def toy():
    inside = np.array([[1.0, 0], [-1, 0], [0, 1], [0, -1]])
    outside = np.array([[1.0, 1], [2, 0], [0, -2], [2, 2], [3, 0], [0, 4]])
    return np.vstack([inside, outside]), np.r_[np.ones(4, bool), np.zeros(6, bool)]


def reference(x, mask, ddof=1):
    """scipy route: cdist Mahalanobis (squared) with the inverse covariance, chi2.sf."""
    inside = x[mask]
    cov = np.atleast_2d(np.cov(inside, rowvar=False, ddof=ddof))
    d2 = cdist(x[~mask], inside.mean(axis=0)[None], "mahalanobis", VI=np.linalg.inv(cov))[:, 0] ** 2
    n_in = int(mask.sum())
    iso = np.sort(d2)[n_in - 1] if len(d2) >= n_in else math.nan
    return iso, stats.chi2.sf(d2, x.shape[1]).sum() / n_in


def test_toy_example_by_hand():
    # CHECKS.md section 5 toy check (Harris et al. 2001; Schmitzer-Torbert et al. 2005) [memory],
    # covariance with n - 1: Sigma = (2/3) I, sorted D^2 = [3, 6, 6, 12, 13.5, 24]
    x, mask = toy()
    assert isolation_distance(x, mask).value == pytest.approx(12.0, rel=1e-12)
    by_hand = (math.exp(-1.5) + 2 * math.exp(-3) + math.exp(-6) + math.exp(-6.75) + math.exp(-12)) / 4
    assert by_hand == pytest.approx(0.08159001822349214, rel=1e-15)
    assert l_ratio(x, mask).value == pytest.approx(by_hand, rel=1e-12)
    # scipy reference route (cdist mahalanobis + chi2.sf)
    iso, lr = reference(x, mask)
    assert iso == pytest.approx(12.0) and lr == pytest.approx(by_hand)
    # the n-normalised covariance gives 16.0 and 0.0431064 (CHECKS.md): we use n - 1
    iso_n, lr_n = reference(x, mask, ddof=0)
    assert iso_n == pytest.approx(16.0) and lr_n == pytest.approx(0.04310638649531125)
    assert isolation_distance(x, mask).value != pytest.approx(iso_n)


def test_matches_scipy_route_on_random_data():
    # reference implementation: scipy cdist + chi2.sf
    rng = np.random.default_rng(0)
    a = rng.multivariate_normal([0, 0, 0, 0, 0], np.diag([1, 2, 3, 1, 1]) + 0.3, 400)
    b = rng.normal(1.5, 2.0, (1500, 5))
    x = np.vstack([a, b])
    mask = np.r_[np.ones(len(a), bool), np.zeros(len(b), bool)]
    sep = cluster_separation(x, mask)
    iso, lr = reference(x, mask)
    assert sep.isolation_distance.value == pytest.approx(iso, rel=1e-10)
    assert sep.l_ratio.value == pytest.approx(lr, rel=1e-9)
    assert (sep.n_inside, sep.n_outside, sep.n_features) == (400, 1500, 5)


def test_separated_and_overlapping_clusters():
    # simulation ground truth: a far cluster is well isolated, an overlapping one is not
    rng = np.random.default_rng(1)
    unit = rng.normal(0, 1, (500, 3))
    far = rng.normal(12, 1, (2000, 3))
    near = rng.normal(0.5, 1, (2000, 3))
    mask = np.r_[np.ones(500, bool), np.zeros(2000, bool)]
    good = cluster_separation(np.vstack([unit, far]), mask)
    bad = cluster_separation(np.vstack([unit, near]), mask)
    assert good.isolation_distance.value > 100 and bad.isolation_distance.value < 10
    assert good.l_ratio.value < 1e-6 and bad.l_ratio.value > 0.5


def test_undefined_cases_give_nan_with_reason():
    rng = np.random.default_rng(2)
    x = rng.normal(0, 1, (30, 2))
    few_outside = np.r_[np.ones(20, bool), np.zeros(10, bool)]
    sep = cluster_separation(x, few_outside)
    assert math.isnan(sep.isolation_distance.value)
    assert "fewer events outside" in sep.isolation_distance.reason
    assert sep.l_ratio.defined                       # L-ratio needs only some outside events
    none_outside = cluster_separation(x, np.ones(30, bool))
    assert "no events lie outside" in none_outside.l_ratio.reason
    too_few = cluster_separation(x, np.r_[np.ones(2, bool), np.zeros(28, bool)])
    assert "needs at least 3" in too_few.isolation_distance.reason
    line = np.column_stack([np.arange(30.0), 2 * np.arange(30.0)])
    singular = cluster_separation(line, np.r_[np.ones(10, bool), np.zeros(20, bool)])
    assert "singular" in singular.isolation_distance.reason and "singular" in singular.l_ratio.reason
    assert not singular.l_ratio.defined


def test_bad_input():
    x, mask = toy()
    with pytest.raises(RigsideError, match="boolean"):
        isolation_distance(x, mask.astype(int))
    with pytest.raises(RigsideError, match="one entry per event"):
        l_ratio(x, mask[:-1])
    x[0, 0] = np.nan
    with pytest.raises(RigsideError, match="finite"):
        l_ratio(x, mask)
    with pytest.raises(RigsideError, match="2-D"):
        l_ratio(np.zeros((2, 2, 2)), np.ones(2, bool))
