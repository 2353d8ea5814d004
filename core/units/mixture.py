"""Gaussian mixtures of the first pass: fitting (:mod:`rigside.core.units.em`) and the
merging of overlapping components by directly estimated misclassification probabilities."""

from __future__ import annotations

import numpy as np

from rigside.core.params import ClusterParams
from rigside.core.units.em import Mixture, fit_em


def fit_mixture(x: np.ndarray, k: int, params: ClusterParams, random_state: int,
                means_init: np.ndarray | None = None) -> Mixture:
    """A full-covariance mixture of ``k`` components fitted to ``x`` (EM limits from ``params``;
    started from k-means, or from ``means_init``)."""
    return fit_em(x, k, max_iter=params.max_iter, tol=params.tol, reg_covar=1e-6, random_state=random_state,
                  means_init=means_init)


def merge_components(posterior: np.ndarray, threshold: float) -> list[list[int]]:
    """Merge mixture components by directly estimated misclassification probabilities.

    Parameters
    ----------
    posterior
        Posterior probability of every component (events x components).
    threshold
        Merge while the largest pairwise misclassification probability exceeds this.

    Returns
    -------
    list of lists
        Component indices of each resulting cluster.
    """
    clusters = [[k] for k in range(posterior.shape[1])]
    tau = np.asarray(posterior, dtype=np.float64).copy()
    while tau.shape[1] > 1:
        pair = misclassification(tau)
        a, b = np.unravel_index(np.argmax(pair), pair.shape)
        if pair[a, b] <= threshold:
            break
        a, b = min(a, b), max(a, b)
        clusters[a] += clusters.pop(b)
        tau[:, a] += tau[:, b]
        tau = np.delete(tau, b, axis=1)
    return clusters


def misclassification(posterior: np.ndarray) -> np.ndarray:
    """Directly estimated misclassification probability of every pair of clusters (Hennig 2010).

    ``posterior`` holds each cluster's posterior probability (events x clusters). Entry (a, b) of
    the symmetric result is max(p(a->b), p(b->a)), p(a->b) being a's posterior weight on the
    events classified as b over a's whole weight; the diagonal is 0.
    """
    tau = np.asarray(posterior, dtype=np.float64)
    hard = tau.argmax(axis=1)
    weight = tau.sum(axis=0)
    p = np.stack([np.bincount(hard, tau[:, a], tau.shape[1]) for a in range(tau.shape[1])])
    p /= np.where(weight > 0, weight, 1.0)[:, None]
    np.fill_diagonal(p, 0.0)
    return np.maximum(p, p.T)
