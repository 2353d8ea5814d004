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


@numba.njit(cache=True, nogil=True)
def _shared_counts(ta, ua, tb, ub, n_a, n_b, tol):
    """Counts of :func:`_match_sorted` for every unit pair, in one pass over time-sorted spikes.

    For a pair (u, v) the earliest-first matching pairs spike ``a`` of u with the first spike of
    v at or after ``a - tol`` that comes after the pair's last matched spike of v, if it lies
    at or before ``a + tol``. ``last[u, v]`` holds that last matched index (into ``tb``);
    ``seen[v] == i`` marks that ``a = ta[i]`` already found its partner in unit v.
    """
    out = np.zeros((n_a, n_b), dtype=np.int64)
    last = np.full((n_a, n_b), -1, dtype=np.int64)
    seen = np.full(n_b, -1, dtype=np.int64)
    lo = 0
    for i in range(len(ta)):
        u = ua[i]
        while lo < len(tb) and tb[lo] < ta[i] - tol:
            lo += 1
        k = lo
        while k < len(tb) and tb[k] <= ta[i] + tol:
            v = ub[k]
            if seen[v] != i and k > last[u, v]:
                out[u, v] += 1
                last[u, v] = k
                seen[v] = i
            k += 1
    return out


def _codes(units: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct ids (ascending) and the position of each entry's id among them."""
    if units.dtype.kind in "iu" and len(units) and int(units.max()) - int(units.min()) < 4 * len(units) + 1024:
        base = units.min()
        present = np.bincount(units - base) > 0
        lookup = np.cumsum(present) - 1
        return np.flatnonzero(present).astype(units.dtype) + base, lookup[units - base]
    ids, code = np.unique(units, return_inverse=True)
    return ids, code.ravel()


def shared_spike_matrix(times_a: np.ndarray, units_a: np.ndarray, times_b: np.ndarray,
                        units_b: np.ndarray, tolerance: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Matched-spike counts for every pair of units from two sortings.

    ``matches[i, j]`` equals ``len(match_times(train_a, train_b, tolerance)[0])`` for the
    sorted trains of units ``ids_a[i]`` and ``ids_b[j]``; all pairs are counted in one merge
    of the time-sorted spikes (a time-sorted input is not sorted again): O(n log n) plus
    O(n w), where ``w`` is the mean number of B spikes within the tolerance of an A spike.

    Parameters
    ----------
    times_a, units_a, times_b, units_b
        Spike times and unit ids of sortings A and B (times in one shared unit, any order).
    tolerance
        Matching tolerance in that unit.

    Returns
    -------
    ids_a, ids_b, matches
        Unit ids of A and B and the matrix ``matches[i, j]`` of spikes of unit ``ids_a[i]``
        matched one-to-one to spikes of unit ``ids_b[j]``.
    """
    times_a, times_b = np.asarray(times_a, np.float64), np.asarray(times_b, np.float64)
    units_a, units_b = np.asarray(units_a), np.asarray(units_b)
    if len(times_a) != len(units_a) or len(times_b) != len(units_b):
        raise ValueError(f"spike times and unit ids must have equal lengths, got {len(times_a)} and "
                         f"{len(units_a)}, {len(times_b)} and {len(units_b)}")
    ids_a, code_a = _codes(units_a)
    ids_b, code_b = _codes(units_b)
    if np.any(np.diff(times_a) < 0):                # ties may come in any order: they give the same counts
        order = np.argsort(times_a)
        times_a, code_a = times_a[order], code_a[order]
    if np.any(np.diff(times_b) < 0):
        order = np.argsort(times_b)
        times_b, code_b = times_b[order], code_b[order]
    out = _shared_counts(times_a, code_a.astype(np.int64), times_b, code_b.astype(np.int64),
                         len(ids_a), len(ids_b), float(tolerance))
    return ids_a, ids_b, out


def jaccard(matches: np.ndarray, n_a: np.ndarray, n_b: np.ndarray) -> np.ndarray:
    """Overlap matches / (n_a + n_b - matches) for a matrix of matched counts (Jaccard 1912)."""
    matches = np.asarray(matches, float)
    denom = np.asarray(n_a, float)[:, None] + np.asarray(n_b, float)[None, :] - matches
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(denom > 0, matches / np.where(denom > 0, denom, 1), 0.0)
