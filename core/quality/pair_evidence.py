"""The numbers behind curation suggestions: how alike two units are, and whether one unit is two.

Each function computes one piece of evidence from plain arrays; :mod:`rigside.core.quality.suggestions`
gathers them for the units of a sorting. Undefined evidence is a
:class:`~rigside.core.quality.metric_inputs.MetricValue` (NaN with its reason), never an error.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rigside.core.errors import RigsideError
from rigside.core.params import ClusterParams
from rigside.core.quality.metric_inputs import MetricValue, undefined
from rigside.core.units.clustering import unit_two_parts
from rigside.core.units.refine import smallest_unit
from rigside.core.units.refractory import MIN_EXPECTED_PAIRS, refractory_gap

SHARED_CHANNEL_SHARE = 0.25
"""A channel takes part in the waveform comparison when either unit's peak-to-peak there is at
least this share of that unit's largest (common practice, no source)."""


@dataclass(frozen=True)
class RefractoryDip:
    """Pairs of two trains in the refractory window against the pairs chance would put there.

    ``observed``: pairs with ``censored <= |lag| < refractory``; ``expected``: the pairs of the
    baseline window scaled to the refractory window's width; ``dip`` = 1 - observed / expected
    (1: empty, as within one refractory neuron); ``p_value``: Poisson probability of at most
    ``observed`` pairs when ``expected`` are due (small: a real gap).
    """

    observed: int
    expected: float
    dip: MetricValue
    p_value: float


def refractory_dip(times_a: np.ndarray, times_b: np.ndarray, censored_s: float, refractory_s: float,
                   baseline_s: tuple[float, float] = (0.005, 0.025)) -> RefractoryDip:
    """The cross-correlogram's refractory gap of two spike trains, as evidence
    (:func:`rigside.core.units.refractory.refractory_gap`; same arguments), its dip undefined when
    too few pairs are expected by chance."""
    observed, expected, p_value = refractory_gap(times_a, times_b, censored_s, refractory_s, baseline_s)
    if math.isnan(p_value):
        return RefractoryDip(observed, expected, undefined(f"fewer than {MIN_EXPECTED_PAIRS:g} pairs expected by "
                                                           f"chance in the refractory window"), math.nan)
    return RefractoryDip(observed, expected, MetricValue(1.0 - observed / expected), p_value)


def gaussian_fit(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mean and covariance (ddof 1) of rows of ``x``, the covariance kept positive definite by a
    ridge of 1e-6 of its mean variance."""
    x = np.asarray(x, dtype=np.float64)
    cov = np.atleast_2d(np.cov(x, rowvar=False))
    ridge = 1e-6 * max(float(np.trace(cov)) / len(cov), 1e-12)
    return x.mean(axis=0), cov + ridge * np.eye(len(cov))


def bhattacharyya_coefficient(mean_a: np.ndarray, cov_a: np.ndarray, mean_b: np.ndarray,
                              cov_b: np.ndarray) -> float:
    """Overlap of two Gaussian densities, exp(-D_B), from 0 (apart) to 1 (the same).

    D_B = (1/8) d' S^-1 d + (1/2) ln(det S / sqrt(det S_a det S_b)), d = mean_b - mean_a,
    S = (S_a + S_b) / 2 (Bhattacharyya 1943, Bull. Calcutta Math. Soc. 35:99-109; Fukunaga 1990,
    Introduction to Statistical Pattern Recognition, eq. 3.152 [memory]). The coefficient is the
    integral of sqrt(p_a p_b) and is unchanged by any invertible linear map of the features.
    """
    s = (cov_a + cov_b) / 2
    d = np.asarray(mean_b, dtype=np.float64) - np.asarray(mean_a, dtype=np.float64)
    _, ld = np.linalg.slogdet(s)
    _, la = np.linalg.slogdet(cov_a)
    _, lb = np.linalg.slogdet(cov_b)
    distance = float(d @ np.linalg.solve(s, d)) / 8 + 0.5 * (ld - 0.5 * (la + lb))
    return math.exp(-max(distance, 0.0))


@dataclass(frozen=True)
class WaveformLikeness:
    """Cosine similarity of two mean waveforms on the channels compared, the ratio of their sizes
    (smaller over larger norm) and the channels compared."""

    similarity: float
    size_ratio: float
    channels: tuple[int, ...]


def waveform_likeness(mean_a: np.ndarray, mean_b: np.ndarray) -> WaveformLikeness:
    """How alike two mean waveforms (samples x channels of one group) are.

    The channels compared are those on which either unit is large (peak-to-peak at least
    :data:`SHARED_CHANNEL_SHARE` of its own largest), so a unit large on a channel where the
    other is small counts against their likeness.
    """
    a, b = np.asarray(mean_a, dtype=np.float64), np.asarray(mean_b, dtype=np.float64)
    if a.shape != b.shape or a.ndim != 2:
        raise RigsideError(f"mean waveforms must be samples x channels of one shape, got {a.shape} and {b.shape}")
    pa, pb = np.ptp(a, axis=0), np.ptp(b, axis=0)
    keep = (pa >= SHARED_CHANNEL_SHARE * pa.max()) | (pb >= SHARED_CHANNEL_SHARE * pb.max())
    va, vb = a[:, keep].ravel(), b[:, keep].ravel()
    na, nb = float(np.linalg.norm(va)), float(np.linalg.norm(vb))
    if na == 0 or nb == 0:
        return WaveformLikeness(math.nan, math.nan, tuple(np.flatnonzero(keep).tolist()))
    return WaveformLikeness(float(va @ vb) / (na * nb), min(na, nb) / max(na, nb),
                            tuple(np.flatnonzero(keep).tolist()))


@dataclass(frozen=True)
class Continuity:
    """Whether one unit's features carry on where the other's stop (as one drifting unit's do).

    ``time_overlap``: overlap of the two units' central 80% time spans over the shorter span;
    ``handover``: Mahalanobis distance between the mean features of the earlier unit's last
    events and the later unit's first events; ``apart``: the same distance between the units'
    whole means; ``continuity``: 1 - handover / apart, clipped to [0, 1] (defined only when the
    units mostly fire at different times).
    """

    time_overlap: float
    handover: float
    apart: float
    continuity: MetricValue


def continuity(times_a: np.ndarray, x_a: np.ndarray, times_b: np.ndarray, x_b: np.ndarray,
               edge_events: int = 100, max_overlap: float = 0.5) -> Continuity:
    """Continuity over time of two units' features (time-sorted rows), as with drift.

    A unit whose waveform drifts slowly may be cut in two by time: the earlier piece's last
    spikes then look like the later piece's first spikes although the two pieces' means differ.
    The distances use the pooled covariance of the events compared (common practice, no source).
    """
    ta, tb = np.asarray(times_a, dtype=np.float64), np.asarray(times_b, dtype=np.float64)
    if np.median(ta) > np.median(tb):
        ta, x_a, tb, x_b = tb, x_b, ta, x_a
    qa, qb = np.quantile(ta, [0.1, 0.9]), np.quantile(tb, [0.1, 0.9])
    span = min(qa[1] - qa[0], qb[1] - qb[0])
    inter = max(0.0, min(qa[1], qb[1]) - max(qa[0], qb[0]))
    overlap = inter / span if span > 0 else 1.0
    m = max(2, min(edge_events, len(ta) // 4, len(tb) // 4))
    end_a, start_b = np.asarray(x_a[-m:], np.float64), np.asarray(x_b[:m], np.float64)
    handover = _mahalanobis(end_a, start_b)
    apart = _mahalanobis(np.asarray(x_a, np.float64), np.asarray(x_b, np.float64))
    if overlap > max_overlap:
        value = undefined(f"the units fire at the same times (overlap {overlap:.2f} of their spans)")
    elif not apart > 0:
        value = undefined("the units' mean features coincide")
    else:
        value = MetricValue(float(np.clip(1.0 - handover / apart, 0.0, 1.0)))
    return Continuity(overlap, handover, apart, value)


def _mahalanobis(x: np.ndarray, y: np.ndarray) -> float:
    """Distance between the means of two sets of rows in the metric of their pooled covariance."""
    d = y.mean(axis=0) - x.mean(axis=0)
    _, pooled = gaussian_fit(np.vstack([x - x.mean(axis=0), y - y.mean(axis=0)]))
    return float(math.sqrt(max(float(d @ np.linalg.solve(pooled, d)), 0.0)))


@dataclass(frozen=True)
class SplitTest:
    """The first pass's split test on one unit (:func:`rigside.core.units.clustering.unit_two_parts`).

    ``delta_bic_per_event``: BIC(1) - BIC(2) (positive favours two parts; Schwarz 1978, Ann.
    Stat. 6:461-464) over the events fitted, divided by their count; ``misclassification``: the
    parts' directly estimated misclassification probability (Hennig 2010); ``overlap``:
    Bhattacharyya coefficient of the two fitted parts; ``smaller_part``: the smaller part's share
    of the events; ``parts``: the part (0 or 1) of every event, as accepting the split makes them;
    ``first_pass_splits``: the first pass would split on these numbers; ``outliers``: events left
    out of the fits (the first fit's smaller part was under
    :data:`~rigside.core.units.refine.OUTLIER_PART`; the first pass does not refit so).
    """

    delta_bic_per_event: float
    misclassification: float
    overlap: float
    smaller_part: float
    parts: np.ndarray
    first_pass_splits: bool
    outliers: int = 0


def split_test(features: np.ndarray, channel: np.ndarray | None, params: ClusterParams,
               stream: int = 0, group_events: int = 0) -> SplitTest | None:
    """One against two full-covariance Gaussians on a unit's features (all columns), started from
    k-means and from its two main channels, as the first pass tests its clusters (but refitted
    without the far events when the first fit's smaller part is only those, see
    :func:`~rigside.core.units.clustering.unit_two_parts`), and exactly as accepting a split
    suggestion (:class:`~rigside.core.units.operations.SplitInTwo`) parts it;
    ``stream`` is the unit id, ``group_events`` the clustered events of its group (for the smallest
    unit size). None when the events are too few or their features constant."""
    test = unit_two_parts(features, channel, params, stream)
    if test is None:
        return None
    m = test.mixture
    overlap = bhattacharyya_coefficient(m.means_[0], m.covariances_[0], m.means_[1], m.covariances_[1])
    least = smallest_unit(params, group_events)
    return SplitTest(test.delta_bic_per_event, test.misclassification, overlap, test.smaller_part,
                     test.second.astype(np.int64), test.splits(params, least) and not test.outliers, test.outliers)
