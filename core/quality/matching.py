"""Matching two spike trains in time, and the overlap of two sets of units.

Two spikes match when they lie within a tolerance of each other; each spike matches at
most one other (one-to-one, earliest first). The overlap of two units is the Jaccard index
of their spike sets under this matching: matches / (n_a + n_b - matches) (Jaccard 1912).
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, nogil=True)
def _match_sorted(a, b, tol):
    ia = np.empty(min(len(a), len(b)), dtype=np.int64)
    ib = np.empty(min(len(a), len(b)), dtype=np.int64)
    n = 0
    j = 0
    for i in range(len(a)):
        while j < len(b) and b[j] < a[i] - tol:
            j += 1
        if j < len(b) and b[j] <= a[i] + tol:
            ia[n] = i
            ib[n] = j
            n += 1
            j += 1
    return ia[:n], ib[:n]


def match_times(a: np.ndarray, b: np.ndarray, tolerance: float) -> tuple[np.ndarray, np.ndarray]:
    """Pair the spikes of two sorted trains that lie within ``tolerance`` of each other.

    Parameters
    ----------
    a, b
        Sorted spike times (any unit: seconds or samples, the same for both).
    tolerance
        Largest allowed distance between matched spikes, in the unit of ``a`` and ``b``.

    Returns
    -------
    ia, ib
        Indices into ``a`` and ``b`` of the matched pairs (one-to-one, in time order).
    """
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    if len(a) > 1 and np.any(np.diff(a) < 0) or len(b) > 1 and np.any(np.diff(b) < 0):
        raise ValueError("spike times must be sorted, got unsorted times")
    return _match_sorted(a, b, float(tolerance))


def shared_spike_matrix(times_a: np.ndarray, units_a: np.ndarray, times_b: np.ndarray,
                        units_b: np.ndarray, tolerance: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Matched-spike counts for every pair of units from two sortings.

    Parameters
    ----------
    times_a, units_a, times_b, units_b
        Spike times and unit ids of sortings A and B (times in one shared unit).
    tolerance
        Matching tolerance in that unit.

    Returns
    -------
    ids_a, ids_b, matches
        Unit ids of A and B and the matrix ``matches[i, j]`` of spikes of unit ``ids_a[i]``
        matched one-to-one to spikes of unit ``ids_b[j]``.
    """
    times_a, units_a = np.asarray(times_a, float), np.asarray(units_a)
    times_b, units_b = np.asarray(times_b, float), np.asarray(units_b)
    ids_a, ids_b = np.unique(units_a), np.unique(units_b)
    trains_a = [np.sort(times_a[units_a == u]) for u in ids_a]
    trains_b = [np.sort(times_b[units_b == u]) for u in ids_b]
    out = np.zeros((len(ids_a), len(ids_b)), dtype=np.int64)
    for i, ta in enumerate(trains_a):
        for j, tb in enumerate(trains_b):
            if len(ta) and len(tb) and ta[0] <= tb[-1] + tolerance and tb[0] <= ta[-1] + tolerance:
                out[i, j] = len(_match_sorted(ta, tb, float(tolerance))[0])
    return ids_a, ids_b, out


def jaccard(matches: np.ndarray, n_a: np.ndarray, n_b: np.ndarray) -> np.ndarray:
    """Overlap matches / (n_a + n_b - matches) for a matrix of matched counts (Jaccard 1912)."""
    matches = np.asarray(matches, float)
    denom = np.asarray(n_a, float)[:, None] + np.asarray(n_b, float)[None, :] - matches
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(denom > 0, matches / np.where(denom > 0, denom, 1), 0.0)
