"""The refractory gap between two spike trains: pairs near lag 0 against the pairs chance puts there.

Two pieces of one neuron share its refractory period, so their cross-correlogram is empty near
lag 0 like its autocorrelogram; two neurons give pairs there at the baseline rate (common
practice in merging clusters, e.g. Harris et al. 2000, J. Neurophysiol. 84:401-414 [memory]).
Used by the first pass's split test (:mod:`rigside.core.units.refine`) and by the curation
suggestions (:mod:`rigside.core.quality.pair_evidence`).
"""

from __future__ import annotations

import math

import numpy as np

from rigside.core.errors import RigsideError

MIN_EXPECTED_PAIRS = 5.0
"""Fewest pairs expected in the refractory window by chance for its gap to be judged."""


def pairs_within(a: np.ndarray, b: np.ndarray, lo: float, hi: float) -> int:
    """Number of pairs (a_i, b_j) of two sorted trains with ``lo <= |b_j - a_i| < hi`` (s).

    Both signs of the lag count; a lag of exactly 0 counts once. Cost O((n_a + n_b) log n_b).
    """
    a, b = np.asarray(a, dtype=np.float64), np.asarray(b, dtype=np.float64)
    after = np.searchsorted(b, a + hi, "left") - np.searchsorted(b, a + lo, "left")
    if lo > 0:
        before = np.searchsorted(b, a - lo, "right") - np.searchsorted(b, a - hi, "right")
    else:
        before = np.searchsorted(b, a, "left") - np.searchsorted(b, a - hi, "right")
    return int(after.sum() + before.sum())


def refractory_gap(times_a: np.ndarray, times_b: np.ndarray, censored_s: float, refractory_s: float,
                   baseline_s: tuple[float, float] = (0.005, 0.025)) -> tuple[int, float, float]:
    """Pairs in the refractory window, the pairs chance would put there, and the gap's p-value.

    Parameters
    ----------
    times_a, times_b
        Sorted spike times (s); the same array for one train's own gap (its autocorrelogram).
    censored_s, refractory_s
        The refractory window is ``censored_s <= |lag| < refractory_s`` (lags below the
        detection dead time are left out: two events of one channel group that close are one).
    baseline_s
        The baseline window ``lo <= |lag| < hi``, scaled to the refractory window's width for the
        expected count (the correlogram's own flanks, so units active at different times compare fairly).

    Returns
    -------
    observed, expected, p_value
        ``p_value``: Poisson probability of at most ``observed`` pairs when ``expected`` are due
        (small: a real gap); NaN when fewer than :data:`MIN_EXPECTED_PAIRS` are expected.
    """
    from scipy.stats import poisson

    lo, hi = baseline_s
    if not 0 <= censored_s < refractory_s <= lo < hi:
        raise RigsideError(f"correlogram windows must be ordered censored < refractory <= baseline start < end, got "
                           f"{censored_s}, {refractory_s}, {lo}, {hi} s")
    observed = pairs_within(times_a, times_b, censored_s, refractory_s)
    if times_a is times_b and censored_s == 0:
        observed -= len(times_a)        # a spike is not paired with itself
    expected = pairs_within(times_a, times_b, lo, hi) * (refractory_s - censored_s) / (hi - lo)
    if expected < MIN_EXPECTED_PAIRS:
        return observed, expected, math.nan
    return observed, expected, float(poisson.cdf(observed, expected))
