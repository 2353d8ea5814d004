"""The compiled mixture fit against scikit-learn's GaussianMixture (reference implementation)."""

import numpy as np
import pytest
from sklearn.mixture import GaussianMixture

from rigside.core.errors import RigsideError
from rigside.core.units.em import fit_em


def clusters(n: int, d: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    centres = rng.normal(0, 3, size=(3, d))
    x = centres[rng.choice(3, size=n)] + rng.normal(size=(n, d))
    x[: n // 4] += rng.standard_t(3, size=(n // 4, d))  # heavy tails, as bursts give
    return x


@pytest.mark.parametrize(("k", "d", "seed"), [(1, 3, 0), (3, 6, 1), (5, 6, 2), (8, 4, 3)])
def test_fit_equals_scikit_learn(k, d, seed):
    # reference: scikit-learn GaussianMixture, full covariances, k-means initialisation, n_init=1
    x = clusters(1500, d, seed)
    ref = GaussianMixture(k, covariance_type="full", max_iter=200, tol=1e-3, reg_covar=1e-6,
                          random_state=seed).fit(x)
    ours = fit_em(x, k, max_iter=200, tol=1e-3, reg_covar=1e-6, random_state=seed)
    assert ours.n_iter_ == ref.n_iter_ and ours.converged_ == ref.converged_
    np.testing.assert_allclose(ours.weights_, ref.weights_, rtol=1e-8, atol=1e-12)
    np.testing.assert_allclose(ours.means_, ref.means_, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(ours.covariances_, ref.covariances_, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(ours.predict_proba(x), ref.predict_proba(x), atol=1e-8)
    assert np.mean(ours.predict(x) == ref.predict(x)) > 0.999  # ties may differ in the last bit
    assert ours.bic(x) == pytest.approx(ref.bic(x), rel=1e-10)


def test_given_starting_means_equal_scikit_learn():
    # reference: scikit-learn GaussianMixture with means_init (weights and covariances from k-means)
    x = clusters(1200, 3, 4)
    start = x[[0, 400, 800]]
    ref = GaussianMixture(3, covariance_type="full", random_state=3, means_init=start).fit(x)
    ours = fit_em(x, 3, random_state=3, means_init=start)
    assert ours.n_iter_ == ref.n_iter_
    np.testing.assert_allclose(ours.means_, ref.means_, rtol=1e-8, atol=1e-10)
    assert ours.bic(x) == pytest.approx(ref.bic(x), rel=1e-10)


def test_iteration_limit_is_reported_as_not_converged():
    x = clusters(800, 4, 5)
    ours = fit_em(x, 4, max_iter=2, tol=1e-12, random_state=0)
    assert ours.n_iter_ == 2 and not ours.converged_


def test_degenerate_component_is_one_clear_error():
    # three distinct points repeated: a fourth component has nothing to describe, and without the
    # diagonal term its covariance is singular
    x = np.repeat(np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]]), 50, axis=0)
    with pytest.raises(RigsideError, match="ill-defined covariance"):
        fit_em(x, 4, reg_covar=0.0, random_state=0)


def test_log_densities_equal_scipys_normal_and_mahalanobis():
    from scipy.spatial.distance import mahalanobis
    from scipy.stats import multivariate_normal

    rng = np.random.default_rng(3)
    x = np.vstack([rng.normal(size=(200, 3)), rng.normal(4.0, 0.5, size=(100, 3))])
    m = fit_em(x, 2, random_state=0)
    logp, d2 = m.log_densities(x[:20])
    for c in range(2):      # reference: scipy's Gaussian log density and Mahalanobis distance
        ref = np.log(m.weights_[c]) + multivariate_normal(m.means_[c], m.covariances_[c]).logpdf(x[:20])
        np.testing.assert_allclose(logp[:, c], ref, rtol=1e-9, atol=1e-9)
        vi = np.linalg.inv(m.covariances_[c])
        np.testing.assert_allclose(d2[:, c], [mahalanobis(r, m.means_[c], vi) ** 2 for r in x[:20]],
                                   rtol=1e-7, atol=1e-9)
