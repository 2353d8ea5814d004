"""The demo's look-alike pair (two units of one bundle, one waveform shape, amplitudes 1 : 0.88)
reaches the curator: as a merge suggestion when the sort kept them apart, as a split suggestion
whose two parts are the pair when it joined them. 60 s of the demo scenario, one seed; on 20 s
there are too few refractory pairs to weigh the join (measured: score 0.24, under ``min_score``).

Matching of found to true spikes: within 0.5 ms (common practice, no source); the holder of a
true unit is the found unit sharing most of its spikes.
"""

from __future__ import annotations

import numpy as np
import pytest

from rigside.core.quality.matching import shared_spike_matrix
from rigside.core.quality.metric_settings import metric_settings
from rigside.core.quality.suggestions import suggest
from rigside.core.units.clustering import unit_two_parts

from .sorting_data import sorted_demo

SECONDS, SEED = 60.0, 0


@pytest.fixture(scope="module")
def sorted_minute(tmp_path_factory):
    return sorted_demo(tmp_path_factory.mktemp("lookalike"), SECONDS, SEED)


def _true_unit_of(events_sample: np.ndarray, truth, units, tol: float) -> np.ndarray:
    """True unit (of ``units``) of every found event within ``tol`` samples of one of its spikes, else -1."""
    out = np.full(len(events_sample), -1)
    for u in units:
        s = np.sort(truth.sample[truth.unit == u])
        i = np.searchsorted(s, events_sample)
        for step in (0, -1):
            j = np.clip(i + step, 0, len(s) - 1)
            out[(np.abs(s[j] - events_sample) <= tol) & (out < 0)] = u
    return out


def test_the_look_alike_pair_appears_among_the_suggestions(sorted_minute):
    params, events, sorting, truth = sorted_minute
    pair = sorted(u for u, kind in truth.unit_kind.items() if kind == "look-alike")
    assert len(pair) == 2
    a = sorting.assignments
    kept = a >= 0
    tol = 0.0005 * events.rate_hz
    ids_t, ids_f, m = shared_spike_matrix(truth.sample, truth.unit, events.sample[kept], a[kept], tol)
    holder = [int(ids_f[m[np.searchsorted(ids_t, u)].argmax()]) for u in pair]
    found = {(x.kind, x.units) for x in suggest(events, sorting, metric_settings(params), cluster=params.cluster)}
    if holder[0] != holder[1]:
        assert ("merge", tuple(sorted(holder))) in found, (holder, sorted(found))
        return
    # measured on this seed: the sort joins the pair in one unit, and the split is suggested
    assert ("split", (holder[0],)) in found, (holder, sorted(found))
    rows = np.flatnonzero(a == holder[0])
    test = unit_two_parts(sorting.data.features[rows], events.channel[rows], params.cluster, stream=holder[0])
    label = _true_unit_of(events.sample[rows], truth, pair, tol)
    known = label >= 0
    agree = max(np.mean(test.second[known] == (label[known] == u)) for u in pair)
    # measured: the parts hold the pair's spikes at 0.944 agreement, 78 of the unit's 2932 events left
    # out of the fits as far (without that, the second part was 3% of the events and scored 0.18)
    assert agree >= 0.88, agree
    assert test.outliers > 0
