"""A sorting scored against the ground truth of a synthetic recording, true unit by true unit.

Spikes are matched one-to-one within a tolerance (0.5 ms by default) by
:func:`rigside.core.quality.matching.shared_spike_matrix`. The agreement of a true unit T and a
found unit F is the Jaccard index of their spike sets, matches / (n_T + n_F - matches)
(Jaccard 1912); true and found units are paired one-to-one by the Hungarian method on the
agreements (Kuhn 1955; ``scipy.optimize.linear_sum_assignment``). Per true unit: agreement,
precision (matches / n_F) and recall (matches / n_T) with its pair.

Counts over the recording (our own definitions, no source): a found unit *belongs to* the true
unit holding most of its spikes when that share is at least one half; a found unit that belongs
to no true unit is *false*; a found unit that belongs to a true unit but is not its pair is a
*fragment*, and a true unit with fragments is *over-split*; a found unit holding at least half of
the spikes of two or more true units has *merged* them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rigside.core.quality.matching import jaccard, shared_spike_matrix

MAJORITY = 0.5
"""Share of spikes that makes a found unit belong to a true unit, or a true unit part of a merge."""


@dataclass
class SortingScore:
    """Scores of one sorting: per true unit (arrays in ``true_ids`` order) and counts."""

    true_ids: np.ndarray
    true_spikes: np.ndarray
    agreement: np.ndarray
    precision: np.ndarray
    recall: np.ndarray
    found_units: int
    false_units: int
    fragments: int
    over_split: int
    merged: int

    def share_at(self, agreement: float, min_spikes: int) -> tuple[int, int]:
        """(true units with at least ``min_spikes`` spikes scoring ``agreement`` or more, such units)."""
        big = self.true_spikes >= min_spikes
        return int((self.agreement[big] >= agreement).sum()), int(big.sum())


def score_sorting(true_sample: np.ndarray, true_unit: np.ndarray, found_sample: np.ndarray,
                  found_unit: np.ndarray, rate_hz: float, tolerance_ms: float = 0.5) -> SortingScore:
    """Score found units (events in no unit carry a negative id and are left out) against the truth.

    Parameters
    ----------
    true_sample, true_unit
        Sample and unit of every true spike.
    found_sample, found_unit
        Sample and unit id of every sorted event (negative: in no unit).
    rate_hz
        Sampling rate, to turn ``tolerance_ms`` into samples.
    tolerance_ms
        Largest time difference of a matched pair of spikes.

    Returns
    -------
    SortingScore
        See the module docstring for the definitions.
    """
    from scipy.optimize import linear_sum_assignment

    keep = np.asarray(found_unit) >= 0
    f_sample, f_unit = np.asarray(found_sample)[keep], np.asarray(found_unit)[keep]
    ids_t, ids_f, m = shared_spike_matrix(true_sample, true_unit, f_sample, f_unit,
                                          tolerance_ms * 1e-3 * rate_hz)
    n_t = np.bincount(np.searchsorted(ids_t, true_unit), minlength=len(ids_t))
    if not len(ids_f) or not len(ids_t):
        zero = np.zeros(len(ids_t))
        return SortingScore(ids_t, n_t, zero, zero, zero.copy(), len(ids_f), len(ids_f), 0, 0, 0)
    n_f = np.bincount(np.searchsorted(ids_f, f_unit), minlength=len(ids_f))
    agree = jaccard(m, n_t, n_f)
    rows, cols = linear_sum_assignment(-agree)
    pair = np.full(len(ids_t), -1)
    pair[rows] = cols
    agreement, precision, recall = np.zeros(len(ids_t)), np.zeros(len(ids_t)), np.zeros(len(ids_t))
    agreement[rows] = agree[rows, cols]
    precision[rows] = m[rows, cols] / np.maximum(n_f[cols], 1)
    recall[rows] = m[rows, cols] / np.maximum(n_t[rows], 1)
    owner = m.argmax(axis=0)
    owned = m.max(axis=0) >= MAJORITY * n_f
    fragment = owned & (pair[owner] != np.arange(len(ids_f)))
    merged = int(((m >= MAJORITY * n_t[:, None]).sum(axis=0) >= 2).sum())
    return SortingScore(true_ids=ids_t, true_spikes=n_t, agreement=agreement, precision=precision, recall=recall,
                        found_units=len(ids_f), false_units=int((~owned).sum()), fragments=int(fragment.sum()),
                        over_split=len(np.unique(owner[fragment])), merged=merged)


def split_true_units(true_sample: np.ndarray, true_unit: np.ndarray, found_sample: np.ndarray,
                     found_unit: np.ndarray, rate_hz: float, share: float = 0.2, min_spikes: int = 0,
                     tolerance_ms: float = 0.5) -> list[int]:
    """True units split in two: at least two found units each holding more than ``share`` of the true
    unit's spikes (spikes matched as in :func:`score_sorting`; our own definition, no source).

    Returns
    -------
    list of int
        Ids of the split true units among those with at least ``min_spikes`` spikes.
    """
    keep = np.asarray(found_unit) >= 0
    ids_t, _, m = shared_spike_matrix(true_sample, true_unit, np.asarray(found_sample)[keep],
                                      np.asarray(found_unit)[keep], tolerance_ms * 1e-3 * rate_hz)
    n_t = np.bincount(np.searchsorted(ids_t, true_unit), minlength=len(ids_t))
    if m.size == 0:
        return []
    split = ((m > share * n_t[:, None]).sum(axis=1) >= 2) & (n_t >= min_spikes)
    return [int(u) for u in ids_t[split]]
