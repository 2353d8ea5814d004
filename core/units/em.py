"""Gaussian mixtures with full covariances fitted by expectation-maximisation, compiled.

The algorithm is scikit-learn's ``GaussianMixture(covariance_type="full", n_init=1,
init_params="kmeans")`` step for step (Dempster, Laird & Rubin 1977, J. R. Stat. Soc. B
39:1-38): responsibilities from one k-means run (scikit-learn ``KMeans``, ``n_init=1``, the
same seed), then E and M steps until the mean log-likelihood changes by less than ``tol``,
then a last E step. The E step (log-densities through the Cholesky factors of the
precisions, log-sum-exp) and the M step (weights, means, covariances) are numba loops over
the events: on the few thousand events and under ten features of one channel group they took
about a fifth of the library's time per iteration (``bench/bench_mixture.py``), which is most
of a first pass. ``tests/core/test_mixture.py`` checks the fit against scikit-learn's.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numba
import numpy as np
from scipy.linalg import LinAlgError, cholesky, solve_triangular

from rigside.core.errors import RigsideError

_EPS = float(np.finfo(np.float64).eps)


_FAST = {"reassoc", "contract", "nsz", "arcp"}
"""Floating-point liberties of the steps: reordered sums (so that loops over events vectorise),
fused multiply-add; infinities and NaN keep their meaning."""


@numba.njit(cache=True, nogil=True, fastmath=_FAST)
def _e_step(xt, means, prec_chol, log_weight_det, resp):  # pragma: no cover - compiled
    """Responsibilities into ``resp`` (components x events) from features ``xt`` (features x events);
    returns the summed log-likelihood of the events."""
    d, n = xt.shape
    k = means.shape[0]
    const = -0.5 * d * math.log(2.0 * math.pi)
    y = np.empty(n)
    for c in range(k):
        resp[c, :] = 0.0
        for j in range(d):
            shift = 0.0
            for m in range(j + 1):  # the precision factor is upper triangular
                shift += means[c, m] * prec_chol[c, m, j]
            y[:] = -shift
            for m in range(j + 1):
                u = prec_chol[c, m, j]
                for i in range(n):
                    y[i] += xt[m, i] * u
            for i in range(n):
                resp[c, i] += y[i] * y[i]
        for i in range(n):
            resp[c, i] = const - 0.5 * resp[c, i] + log_weight_det[c]
    top = resp[0].copy()
    for c in range(1, k):
        for i in range(n):
            top[i] = max(top[i], resp[c, i])
    acc = np.zeros(n)
    for c in range(k):
        for i in range(n):
            e = math.exp(resp[c, i] - top[i])
            resp[c, i] = e
            acc[i] += e
    total = 0.0
    for i in range(n):
        total += top[i] + math.log(acc[i])
    for c in range(k):
        for i in range(n):
            resp[c, i] /= acc[i]
    return total


@numba.njit(cache=True, nogil=True, fastmath=_FAST)
def _m_step(xt, resp, reg_covar, eps, nk, means, covs):  # pragma: no cover - compiled
    """Weights (as counts), means and covariances from responsibilities (components x events)."""
    d, n = xt.shape
    k = resp.shape[0]
    dx = np.empty((d, n))
    for c in range(k):
        t = 0.0
        for i in range(n):
            t += resp[c, i]
        nk[c] = t + 10.0 * eps
        for j in range(d):
            t = 0.0
            for i in range(n):
                t += resp[c, i] * xt[j, i]
            means[c, j] = t / nk[c]
        for j in range(d):
            for i in range(n):
                dx[j, i] = xt[j, i] - means[c, j]
        for j in range(d):
            for m in range(j + 1):
                t = 0.0
                for i in range(n):
                    t += resp[c, i] * dx[j, i] * dx[m, i]
                covs[c, j, m] = t / nk[c]
                covs[c, m, j] = t / nk[c]
            covs[c, j, j] += reg_covar


@dataclass
class Mixture:
    """A fitted mixture, with scikit-learn's attribute names: ``weights_`` (k), ``means_`` (k x d),
    ``covariances_`` and ``precisions_cholesky_`` (k x d x d), ``n_iter_``, ``converged_``."""

    weights_: np.ndarray
    means_: np.ndarray
    covariances_: np.ndarray
    precisions_cholesky_: np.ndarray
    n_iter_: int
    converged_: bool

    @property
    def n_components(self) -> int:
        return len(self.weights_)

    def _resp(self, x: np.ndarray) -> tuple[np.ndarray, float]:
        xt = np.ascontiguousarray(np.asarray(x, dtype=np.float64).T)
        out = np.empty((self.n_components, xt.shape[1]))
        return out, _e_step(xt, self.means_, self.precisions_cholesky_, _log_weight_det(self), out)

    def predict_proba(self, x: np.ndarray) -> np.ndarray:
        """Posterior probability of every component for every row of ``x`` (events x components)."""
        return self._resp(x)[0].T

    def predict(self, x: np.ndarray) -> np.ndarray:
        """Component of largest posterior for every row of ``x``."""
        return self._resp(x)[0].argmax(axis=0)

    def bic(self, x: np.ndarray) -> float:
        """Bayesian information criterion on ``x`` (Schwarz 1978; scikit-learn's parameter count)."""
        _, total = self._resp(x)
        k, d = self.means_.shape
        n_parameters = k * d * (d + 1) / 2.0 + k * d + k - 1
        return -2.0 * total + n_parameters * math.log(len(x))


def _log_weight_det(m: Mixture) -> np.ndarray:
    diag = np.diagonal(m.precisions_cholesky_, axis1=1, axis2=2)
    return np.log(m.weights_) + np.log(diag).sum(axis=1)


def _precision_cholesky(covs: np.ndarray) -> np.ndarray:
    d = covs.shape[1]
    out = np.empty_like(covs)
    for c, cov in enumerate(covs):
        try:
            lower = cholesky(cov, lower=True)
        except LinAlgError:
            raise RigsideError("fitting the mixture failed: a component has an ill-defined covariance "
                               "(too few distinct events); lower the number of clusters") from None
        out[c] = solve_triangular(lower, np.eye(d), lower=True).T
    return out


def fit_em(x: np.ndarray, k: int, max_iter: int = 100, tol: float = 1e-3, reg_covar: float = 1e-6,
           random_state: int = 0, means_init: np.ndarray | None = None) -> Mixture:
    """Fit a ``k``-component full-covariance Gaussian mixture to ``x`` by EM.

    Parameters
    ----------
    x
        Events x features (float64 is used).
    k
        Number of components (at most the number of events).
    max_iter, tol, reg_covar
        EM iteration limit, convergence tolerance on the mean log-likelihood and the value added
        to every covariance diagonal (scikit-learn meanings).
    random_state
        Seed of the k-means initialisation.
    means_init
        Starting means (k x d); the starting weights and covariances still come from the k-means
        partition, as in scikit-learn.

    Returns
    -------
    Mixture
        The fitted parameters, the iterations run and whether ``tol`` was reached.
    """
    from sklearn.cluster import KMeans  # import on first fit: seconds a session-only window never pays
    from sklearn.exceptions import ConvergenceWarning

    x = np.ascontiguousarray(x, dtype=np.float64)
    n, d = x.shape
    with warnings.catch_warnings():  # fewer distinct points than k: the fit below says so, if it fails
        warnings.simplefilter("ignore", ConvergenceWarning)
        labels = KMeans(n_clusters=k, n_init=1, random_state=random_state).fit(x).labels_
    xt = np.ascontiguousarray(x.T)
    resp = (np.arange(k)[:, None] == labels[None, :]).astype(np.float64)  # the k-means partition
    nk, means, covs = np.empty(k), np.empty((k, d)), np.empty((k, d, d))
    _m_step(xt, resp, reg_covar, _EPS, nk, means, covs)
    start = means if means_init is None else np.ascontiguousarray(means_init, dtype=np.float64).copy()
    m = Mixture(nk / n, start, covs.copy(), _precision_cholesky(covs), 0, False)
    lower = -np.inf
    for it in range(1, max_iter + 1):
        previous = lower
        lower = _e_step(xt, m.means_, m.precisions_cholesky_, _log_weight_det(m), resp) / n
        _m_step(xt, resp, reg_covar, _EPS, nk, means, covs)
        m = Mixture(nk / nk.sum(), means.copy(), covs.copy(), _precision_cholesky(covs), it, False)
        if abs(lower - previous) < tol:
            m.converged_ = True
            break
    return m


def warm_up() -> None:
    """Import the k-means initialisation and load the compiled steps, before worker processes fork, so
    that they inherit both. No k-means runs here: its thread-pool state would not survive the fork."""
    import sklearn.cluster  # noqa: F401

    xt, resp = np.zeros((1, 2)), np.ones((1, 2))
    nk, means, covs = np.empty(1), np.empty((1, 1)), np.empty((1, 1, 1))
    _m_step(xt, resp, 1e-6, _EPS, nk, means, covs)
    _e_step(xt, means, np.ones((1, 1, 1)), np.zeros(1), resp)
