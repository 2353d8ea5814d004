"""First-pass clustering against the known units of the synthetic demo (invented ground truth).

Pairing: Hungarian assignment (scipy.optimize.linear_sum_assignment) on the overlap matrix.
Overlap: the Jaccard index of the two spike sets, matches / (n_true + n_found - matches),
with spikes matched one-to-one within 0.5 ms (Jaccard 1912). It also charges detection misses
(overlapping spikes in one bundle) to the unit, so it is a lower bound on clustering accuracy.
"""

import numpy as np
import pytest
from scipy.optimize import linear_sum_assignment

from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.quality.matching import jaccard, shared_spike_matrix
from rigside.core.signal.features import compute_features
from rigside.core.signal.pipeline import detect
from rigside.core.synthetic.synth import write_synth
from rigside.core.synthetic.truth import load_truth
from rigside.core.units.first_pass import first_pass


@pytest.fixture(scope="module")
def sorted_demo(tmp_path_factory):
    path = tmp_path_factory.mktemp("sortgt") / "demo.bin"
    write_synth(path, seconds=60, channels=16, seed=0)
    rec = open_recording(path)
    params = Params()
    table = detect(rec, params)
    events = table.subset(table.mask(threshold_sigma=params.detect.threshold_sigma, include_artefacts=True))
    sorting = first_pass(events, compute_features(rec, events, params), seed=0)
    return events, sorting, load_truth(rec.truth_path())


def test_well_separated_units_are_recovered(sorted_demo):
    events, sorting, truth = sorted_demo
    a = sorting.assignments
    found = a >= 0
    tol = 0.0005 * events.rate_hz
    ids_t, ids_f, m = shared_spike_matrix(truth.sample, truth.unit, events.sample[found], a[found], tol)
    n_t = np.array([(truth.unit == u).sum() for u in ids_t])
    n_f = np.array([(a == u).sum() for u in ids_f])
    agree = jaccard(m, n_t, n_f)
    rows, cols = linear_sum_assignment(-agree)
    best = dict(zip(ids_t[rows].tolist(), agree[rows, cols].tolist()))
    # well separated: not one of the look-alike pair, and at least 100 spikes (a mixture fit
    # cannot resolve a cluster of a few dozen events among thousands)
    checked = [u for u in ids_t.tolist() if truth.unit_kind[u] != "look-alike" and (truth.unit == u).sum() >= 100]
    assert len(checked) >= 8
    for u in checked:
        assert best[u] >= 0.90, (u, truth.unit_kind[u], best[u])


def test_first_pass_is_reproducible_from_its_seed(sorted_demo):
    events, sorting, _ = sorted_demo
    again = first_pass(events, (sorting.data.features, sorting.data.feature_names)[0],
                       feature_names=sorting.data.feature_names, seed=0)
    np.testing.assert_array_equal(again.assignments, sorting.assignments)
