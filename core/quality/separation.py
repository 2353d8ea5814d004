"""Cluster separation in feature space: isolation distance and L-ratio.

Both rest on the squared Mahalanobis distance of every event outside a unit from the unit's
own mean, under the unit's own covariance::

    D^2_i = (x_i - mu_C)^T Sigma_C^-1 (x_i - mu_C)

- Isolation distance (Harris et al. 2001, Neuron 32:141-149): the n_C-th smallest D^2 among
  the events outside the unit, n_C the number of events inside it. Undefined when fewer events
  lie outside than inside.
- L-ratio (Schmitzer-Torbert et al. 2005, Neuroscience 131:1-11): L = sum over outside events
  of the chi-square survival function of D^2 with as many degrees of freedom as features
  (``scipy.special.chdtrc``);
  L-ratio = L / n_C. Undefined when no event lies outside.

The covariance is the sample covariance with the n - 1 normalisation (``np.cov`` default).
Both assume a unit's events form a Gaussian cloud in feature space.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from rigside.core.errors import RigsideError
from rigside.core.quality.metric_inputs import MetricValue, undefined

_SINGULAR_RCOND = 1e-10
"""Smallest eigenvalue ratio (min / max) of a usable covariance matrix."""


@numba.njit(cache=True, nogil=True)
def _outside_distances(x, mu, whiten, in_unit, n_out):
    """Squared Mahalanobis distances of the outside rows.

    ``whiten`` is the inverse of the lower Cholesky factor of the unit's covariance (lower
    triangular), so D^2 = |whiten @ (x - mu)|^2.
    """
    n, d = x.shape
    d2 = np.empty(n_out)
    v = np.empty(d)
    k = 0
    for i in range(n):
        if in_unit[i]:
            continue
        for j in range(d):
            v[j] = x[i, j] - mu[j]
        s = 0.0
        for r in range(d):
            y = 0.0
            for c in range(r + 1):
                y += whiten[r, c] * v[c]
            s += y * y
        d2[k] = s
        k += 1
    return d2


@dataclass(frozen=True)
class Separation:
    """Isolation distance and L-ratio of one unit, from one pass over the distances.

    Attributes
    ----------
    isolation_distance, l_ratio
        Value with reason (NaN and a reason when undefined).
    n_inside, n_outside, n_features
        Events inside and outside the unit, and the feature-space dimension.
    """

    isolation_distance: MetricValue
    l_ratio: MetricValue
    n_inside: int
    n_outside: int
    n_features: int


def _checked(features, in_unit) -> tuple[np.ndarray, np.ndarray]:
    x = np.asarray(features, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2:
        raise RigsideError(f"features must be a 2-D array (events x features), got shape {x.shape}")
    mask = np.asarray(in_unit)
    if mask.dtype != np.bool_ or mask.shape != (len(x),):
        raise RigsideError(f"unit mask must be a boolean array with one entry per event ({len(x)}), "
                           f"got dtype {mask.dtype} and shape {mask.shape}")
    if not np.all(np.isfinite(x)):
        raise RigsideError(f"features must hold finite numbers, got "
                           f"{int(np.count_nonzero(~np.isfinite(x)))} NaN or infinite values")
    return x, mask


def separation_of_checked(x: np.ndarray, in_unit: np.ndarray) -> Separation:
    """:func:`cluster_separation` for arrays already checked (float64 2-D, boolean mask)."""
    n_in = int(np.count_nonzero(in_unit))
    n_out = len(x) - n_in
    d = x.shape[1]

    def both_undefined(reason: str) -> Separation:
        return Separation(undefined(reason), undefined(reason), n_in, n_out, d)

    if n_in <= d:
        return both_undefined(f"the unit has {n_in} events; a covariance over {d} features "
                              f"needs at least {d + 1}")
    inside = x[in_unit]
    mu = inside.mean(axis=0)
    cov = np.atleast_2d(np.cov(inside, rowvar=False))
    eig = np.linalg.eigvalsh(cov)
    if not eig[-1] > 0 or eig[0] <= eig[-1] * _SINGULAR_RCOND:
        return both_undefined("the unit's feature covariance is singular (its events lie on a "
                              "lower-dimensional subspace)")
    if n_out == 0:
        return both_undefined("no events lie outside the unit in its feature space")
    whiten = np.tril(np.linalg.inv(np.linalg.cholesky(cov)))
    d2 = _outside_distances(np.ascontiguousarray(x), mu, whiten, in_unit, n_out)
    from scipy.special import chdtrc  # imported on use: scipy is not loaded at start-up
    lr = MetricValue(float(chdtrc(d, d2).sum()) / n_in)
    if n_out < n_in:
        iso = undefined(f"fewer events outside the unit ({n_out}) than inside ({n_in})")
    else:
        iso = MetricValue(float(np.partition(d2, n_in - 1)[n_in - 1]))
    return Separation(iso, lr, n_in, n_out, d)


def cluster_separation(features: np.ndarray, in_unit: np.ndarray) -> Separation:
    """Isolation distance and L-ratio of the events in ``in_unit`` against all other events.

    Parameters
    ----------
    features
        Events x features (e.g. principal components of the waveforms of one channel group).
    in_unit
        Boolean mask, True for the unit's events.

    Returns
    -------
    Separation
        Both metrics with reasons. The unit's covariance uses the n - 1 normalisation
        (``np.cov`` default). Undefined (NaN with a reason) when the unit has no more events
        than features, its covariance is singular, or (isolation distance) fewer events lie
        outside than inside, or (L-ratio) none lie outside.
    """
    x, mask = _checked(features, in_unit)
    return separation_of_checked(x, mask)


def isolation_distance(features: np.ndarray, in_unit: np.ndarray) -> MetricValue:
    """Isolation distance (Harris et al. 2001): the n_C-th smallest squared Mahalanobis
    distance, from the unit's mean under its covariance (n - 1 normalisation), among the
    events outside the unit.

    Parameters
    ----------
    features
        Events x features.
    in_unit
        Boolean mask of the unit's events.

    Returns
    -------
    MetricValue
        ``value`` in squared-distance units (larger: better isolated), or NaN with ``reason``
        when fewer events lie outside than inside, the covariance is singular, or the unit has
        too few events.
    """
    return cluster_separation(features, in_unit).isolation_distance


def l_ratio(features: np.ndarray, in_unit: np.ndarray) -> MetricValue:
    """L-ratio (Schmitzer-Torbert et al. 2005): the sum over outside events of the chi-square
    survival function (df = number of features) of their squared Mahalanobis distance from the
    unit, divided by the unit's event count. Covariance with the n - 1 normalisation.

    Parameters
    ----------
    features
        Events x features.
    in_unit
        Boolean mask of the unit's events.

    Returns
    -------
    MetricValue
        ``value`` (smaller: better isolated), or NaN with ``reason`` when no event lies outside,
        the covariance is singular, or the unit has too few events.
    """
    return cluster_separation(features, in_unit).l_ratio
