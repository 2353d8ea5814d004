"""ISI histograms, auto- and cross-correlograms of spike trains.

Correlogram bins are half-open, [k * bin, (k + 1) * bin) for k = -n .. n - 1 with
n = window / bin, so the bins tile [-window, window) and the edge at lag 0 separates
"b after a" from "b before a". The lag of a pair is t_b - t_a. Counting walks both sorted
trains once (compiled), so the cost grows with the number of pairs inside the window.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from rigside.core.errors import ParamError
from rigside.core.quality.metric_inputs import positive, spike_times


@numba.njit(cache=True, nogil=True)
def _count_lags(a, b, bin_s, n_half, skip_same):
    counts = np.zeros(2 * n_half, dtype=np.int64)
    window = n_half * bin_s
    start = 0
    for i in range(len(a)):
        while start < len(b) and b[start] < a[i] - window:
            start += 1
        j = start
        while j < len(b) and b[j] < a[i] + window:
            if not (skip_same and j == i):
                k = int(math.floor((b[j] - a[i]) / bin_s)) + n_half
                if 0 <= k < 2 * n_half:
                    counts[k] += 1
            j += 1
    return counts


def _bins(bin_s: float, window_s: float) -> int:
    bin_s = positive("correlogram bin", bin_s)
    window_s = positive("correlogram window", window_s)
    n_half = int(round(window_s / bin_s))
    if n_half < 1 or abs(n_half * bin_s - window_s) > 1e-9 * window_s:
        raise ParamError(f"correlogram window must be a whole number of bins ({bin_s * 1e3:g} ms), "
                         f"got {window_s * 1e3:g} ms")
    return n_half


def crosscorrelogram(times_a: np.ndarray, times_b: np.ndarray, bin_s: float,
                     window_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Counts of lags t_b - t_a over all pairs of a spike in A and a spike in B.

    Parameters
    ----------
    times_a, times_b
        Sorted spike times (s).
    bin_s
        Bin width (s).
    window_s
        Largest lag shown (s), a whole number of bins.

    Returns
    -------
    counts, edges
        ``counts[k]`` pairs with lag in [edges[k], edges[k + 1]); ``edges`` runs from
        -window_s to window_s.
    """
    n_half = _bins(bin_s, window_s)
    a = spike_times(times_a, name="spike times of train A")
    b = spike_times(times_b, name="spike times of train B")
    counts = _count_lags(a, b, float(bin_s), n_half, False)
    return counts, np.arange(-n_half, n_half + 1) * float(bin_s)


def autocorrelogram(times_s: np.ndarray, bin_s: float, window_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Counts of lags between all ordered pairs of distinct spikes of one train.

    Parameters
    ----------
    times_s
        Sorted spike times (s).
    bin_s, window_s
        Bin width and largest lag (s); the window is a whole number of bins.

    Returns
    -------
    counts, edges
        As :func:`crosscorrelogram`; a spike is never paired with itself, so the two bins
        beside lag 0 show the refractory gap (symmetric up to pairs that fall exactly on an edge).
    """
    n_half = _bins(bin_s, window_s)
    t = spike_times(times_s)
    counts = _count_lags(t, t, float(bin_s), n_half, True)
    return counts, np.arange(-n_half, n_half + 1) * float(bin_s)


def isi_histogram(spike_times_s: np.ndarray, bin_s: float, max_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Histogram of intervals between consecutive spikes.

    Parameters
    ----------
    spike_times_s
        Sorted spike times (s).
    bin_s
        Bin width (s).
    max_s
        Longest interval shown (s); rounded up to a whole number of bins.

    Returns
    -------
    counts, edges
        ``counts[k]`` intervals in [edges[k], edges[k + 1]); longer intervals are not counted.
    """
    bin_s = positive("ISI bin", bin_s)
    max_s = positive("longest ISI shown", max_s)
    n_bins = max(1, int(math.ceil(max_s / bin_s - 1e-9)))
    isi = np.diff(spike_times(spike_times_s))
    k = np.floor(isi / bin_s).astype(np.int64)
    counts = np.bincount(k[k < n_bins], minlength=n_bins)
    return counts, np.arange(n_bins + 1) * bin_s
