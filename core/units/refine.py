"""What the first pass does with a group's clusters before they are offered as units.

Two steps, in this order, on the standardised features of one channel group (see
:mod:`rigside.core.units.clustering`):

1. **Fragments.** A cluster with fewer than max(``min_unit_events``, ``min_unit_share`` x the
   group's clustered events) events is too small to be judged (its isolation and refractory
   numbers mean little) and is not offered as a unit. Each of its events joins the remaining
   cluster whose mixture component fits it best (largest weighted density among the components
   of the remaining clusters) when the fit is good: the squared Mahalanobis distance to that
   component is at most the ``fragment_fit`` quantile of the chi-square distribution with as
   many degrees of freedom as features (the distribution of that distance for events truly
   drawn from the component; common practice, no source). Every other event stays
   *unassigned*: in no unit (id -1) but not an artefact, in the group's unassigned pool, from
   which the curator can move events into a unit. A group whose clusters are all fragments
   keeps all its events unassigned.
2. **Split test** (``split_test``). Every remaining cluster is re-examined on its own events (a
   seeded subsample of at most ``fit_events``): a two-component mixture (started once from
   k-means and, when a second main channel holds at least ``min_unit_events`` events and a
   tenth of the cluster, once from the means of the events of its two main channels) is
   compared with one component by BIC (Schwarz 1978). The cluster is split when two components
   win and the two parts do not share a refractory gap, and their estimated misclassification
   probability (the DEMP criterion that merged components, Hennig 2010) is small enough. The
   gap: two pieces of one neuron (e.g. the large and small spikes of its bursts) keep its
   refractory period between them, two neurons do not (:mod:`rigside.core.units.refractory`);
   when chance would put at least five pairs of the parts' spikes at lags from
   ``gap_censored_ms`` to ``gap_refractory_ms`` and the Poisson probability of as few pairs as
   seen is below ``split_gap_p``, the cluster is not split. When the gap could be judged (and
   did not join the parts), the misclassification limit is ``split_overlap``, otherwise
   ``merge_overlap`` (so an unguarded split is never one the merging step would undo):
   ``split_overlap`` is looser because a small unit beside a large one has a larger share of
   its events misclassified. When both parts keep at least the smallest unit size, both are units and
   are tested again while the group has fewer than ``k_max`` clusters; otherwise (with
   ``split_fragments``) the small part is a fragment, and its events go by step 1's rule to the
   Gaussian (mean and covariance of its events) of the cluster that fits them best, or stay
   unassigned.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rigside.core.params import ClusterParams
from rigside.core.units.em import Mixture, partition_mixture
from rigside.core.units.mixture import fit_mixture, misclassification
from rigside.core.units.refractory import refractory_gap

SECOND_CHANNEL_SHARE = 0.1
"""Share of a cluster's events a second main channel must hold to start a split from the channels."""

OUTLIER_PART = 0.1
"""A part of a split test holding less than this share of a unit's events is taken for its outliers
when the unit is weighed for a split in curation (:func:`trimmed_two_part_test`)."""


def smallest_unit(params: ClusterParams, n_group: int) -> int:
    """Fewest events a first-pass unit of a group of ``n_group`` clustered events may have."""
    return max(params.min_unit_events, int(np.ceil(params.min_unit_share * n_group)))


def absorb_fragments(z: np.ndarray, labels: np.ndarray, mixture: Mixture, merged: list[list[int]],
                     params: ClusterParams) -> np.ndarray:
    """Labels with the fragments' events moved to the best-fitting kept cluster or to -1.

    Parameters
    ----------
    z
        Standardised features of the group's clustered events.
    labels
        Cluster (index into ``merged``) of every event; -1 (already unassigned) is left alone.
    mixture
        The fitted mixture; ``merged`` lists the components of each cluster.
    params
        ``min_unit_events``, ``min_unit_share`` and ``fragment_fit``.

    Returns
    -------
    np.ndarray
        int64 labels, -1 for unassigned events (cluster indices unchanged otherwise).
    """
    from scipy.stats import chi2

    labels = np.asarray(labels, dtype=np.int64).copy()
    inside = labels >= 0
    sizes = np.bincount(labels[inside], minlength=len(merged))
    small = sizes < smallest_unit(params, len(labels))
    if not small.any():
        return labels
    rows = np.flatnonzero(inside)[small[labels[inside]]]
    kept = [c for c in range(len(merged)) if not small[c]]
    if not kept:
        labels[rows] = -1
        return labels
    comps = np.asarray([comp for c in kept for comp in merged[c]])
    owner = np.asarray([c for c in kept for _ in merged[c]])
    logp, d2 = mixture.log_densities(z[rows])
    best = logp[:, comps].argmax(axis=1)
    good = d2[:, comps][np.arange(len(rows)), best] <= chi2.ppf(params.fragment_fit, z.shape[1])
    labels[rows] = np.where(good, owner[best], -1)
    return labels


def split_clusters(z: np.ndarray, labels: np.ndarray, channel: np.ndarray | None, params: ClusterParams,
                   rng: np.random.Generator, time_s: np.ndarray | None = None) -> np.ndarray:
    """Labels after the split test (see the module docstring); -1 labels are left alone.

    Parameters
    ----------
    z
        Standardised features of the group's clustered events.
    labels
        Cluster of every event (0..m-1, -1 unassigned).
    channel
        Main (detection) channel of every event, or None to use the features alone.
    params
        ``fit_events``, ``split_overlap``, the gap settings, ``k_max`` and the smallest unit size.
    rng
        Source of the subsamples and of the fits' random states.
    time_s
        Time of every event (s), for the refractory gap between the parts (None: no gap test).

    Returns
    -------
    np.ndarray
        int64 labels; a split cluster keeps its index for one part, the other part is numbered
        after the existing clusters. A part too small to be a unit is a fragment: its events go by
        the fragment rule (:func:`absorb_fragments`) to the best-fitting cluster's Gaussian or to -1.
    """
    labels = np.asarray(labels, dtype=np.int64).copy()
    least = smallest_unit(params, len(labels))
    todo = sorted(int(c) for c in np.unique(labels[labels >= 0]))
    n_clusters = n_units = len(todo)
    while todo and n_units < params.k_max:
        c = todo.pop(0)
        idx = np.flatnonzero(labels == c)
        if len(idx) < 2 * least:
            continue
        test = two_part_test(z[idx], None if channel is None else channel[idx], params, rng)
        gap_p = math.nan if time_s is None else gap_p_value(time_s[idx], test.second, params)
        if gap_p < params.split_gap_p:
            continue        # the parts keep one refractory period: pieces of one neuron
        loose = not math.isnan(gap_p)
        unit_split = test.splits(params, least, loose)
        if not (test.apart(params, loose) and 0 < test.smaller_part and (unit_split or params.split_fragments)):
            continue
        labels[idx[test.second]] = n_clusters
        if unit_split:
            todo += [c, n_clusters]
            n_units += 1
        n_clusters += 1     # otherwise one part is a fragment, the other stays as tested
    used = labels >= 0
    if np.bincount(labels[used], minlength=n_clusters).min(initial=least) >= least:
        return labels
    parts = partition_mixture(z[used], labels[used], n_clusters)
    return absorb_fragments(z, labels, parts, [[c] for c in range(n_clusters)], params)


def gap_p_value(time_s: np.ndarray, second: np.ndarray, params: ClusterParams) -> float:
    """Poisson p-value of the refractory gap between the two parts of a cluster (``second`` marks
    one; window from the gap settings): small when the parts keep one refractory period, NaN when
    chance would put too few pairs in the window to judge."""
    a, b = np.sort(time_s[~second]), np.sort(time_s[second])
    return refractory_gap(a, b, params.gap_censored_ms / 1e3, params.gap_refractory_ms / 1e3)[2]


@dataclass(frozen=True)
class TwoPartTest:
    """One cluster's events fitted by one and by two Gaussians (the split test's numbers).

    ``delta_bic_per_event``: BIC(one) - BIC(two) over the fitted events, per event (positive
    favours two; Schwarz 1978, Ann. Stat. 6:461-464); ``misclassification``: the two parts'
    directly estimated misclassification probability (:func:`~rigside.core.units.mixture.misclassification`);
    ``second``: mask of the events in the second part; ``mixture``: the two-part fit;
    ``from_channels``: the fit kept was started from the two main channels; ``outliers``: events
    left out of the fits (:func:`trimmed_two_part_test`), assigned by the two-part fit all the same.
    """

    delta_bic_per_event: float
    misclassification: float
    second: np.ndarray
    mixture: Mixture
    from_channels: bool
    outliers: int = 0

    @property
    def smaller_part(self) -> float:
        """Share of the events in the smaller part."""
        k = int(self.second.sum())
        return min(k, len(self.second) - k) / max(1, len(self.second))

    def apart(self, params: ClusterParams, loose: bool = False) -> bool:
        """Two parts win BIC and do not overlap by more than ``merge_overlap`` (``loose``, when the
        refractory gap could be judged and did not join them: ``split_overlap``)."""
        limit = params.split_overlap if loose else params.merge_overlap
        return self.delta_bic_per_event > 0 and self.misclassification <= limit

    def splits(self, params: ClusterParams, least: int, loose: bool = False) -> bool:
        """True when the first pass splits on this test into two units: the parts are :meth:`apart`
        and both hold at least ``least`` events."""
        k = int(self.second.sum())
        return self.apart(params, loose) and min(k, len(self.second) - k) >= least


def two_part_test(z: np.ndarray, channel: np.ndarray | None, params: ClusterParams,
                   rng: np.random.Generator) -> TwoPartTest:
    """Fit one and two Gaussians to one cluster's standardised features (see the module docstring).

    Parameters
    ----------
    z
        Standardised features of the cluster's events (at least two events).
    channel
        Main (detection) channel of every event, or None to start from k-means only.
    params
        ``fit_events`` (the seeded subsample fitted), ``min_unit_events`` and the EM limits.
    rng
        Source of the subsample and of the fits' random state.
    """
    n = len(z)
    fit = np.sort(rng.choice(n, params.fit_events, replace=False)) if n > params.fit_events else np.arange(n)
    zf = z[fit]
    state = int(rng.integers(0, 2**31 - 1))
    one = fit_mixture(zf, 1, params, state)
    starts = [None]
    if channel is not None:
        counts = np.bincount(channel[fit])
        top = np.argsort(-counts, kind="stable")[:2]
        if len(top) == 2 and counts[top[1]] >= max(params.min_unit_events, SECOND_CHANNEL_SHARE * len(fit)):
            starts.append(np.stack([zf[channel[fit] == t].mean(axis=0) for t in top]))
    fits = [fit_mixture(zf, 2, params, state, means_init=m) for m in starts]
    bics = [gm.bic(zf) for gm in fits]
    best = int(np.argmin(bics))
    two = fits[best]
    return TwoPartTest((one.bic(zf) - bics[best]) / len(zf), float(misclassification(two.predict_proba(zf))[0, 1]),
                       two.predict(z) == 1, two, best == 1)


def trimmed_two_part_test(z: np.ndarray, channel: np.ndarray | None, params: ClusterParams,
                          rng: np.random.Generator) -> TwoPartTest | None:
    """:func:`two_part_test` on the events one Gaussian explains, every event assigned by its fit.

    The events whose squared Mahalanobis distance to the mean and covariance of all of them is
    beyond the ``fragment_fit`` quantile of the chi-square distribution (as many degrees of
    freedom as features; the rule of :func:`absorb_fragments`) are left out of the fits: a few
    far events otherwise draw the second component to themselves, and two units that look alike
    stay one. None when fewer than two events are left.
    """
    from scipy.stats import chi2

    _, d2 = partition_mixture(z, np.zeros(len(z), dtype=np.int64), 1).log_densities(z)
    keep = d2[:, 0] <= chi2.ppf(params.fragment_fit, z.shape[1])
    if keep.sum() < 2:
        return None
    test = two_part_test(z[keep], None if channel is None else channel[keep], params, rng)
    return TwoPartTest(test.delta_bic_per_event, test.misclassification, test.mixture.predict(z) == 1,
                       test.mixture, test.from_channels, int((~keep).sum()))
