"""A unit's footprint on the bundled probe demo, checked against its ground truth and a direct computation;
the order in which traces stack probe sites."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.distance import cdist

from rigside.core.errors import RigsideError
from rigside.core.events import EventTable
from rigside.core.io.positions import site_order
from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.quality.footprint import unit_footprint
from rigside.core.signal.snippets import event_snippets, spread_subsample
from rigside.core.synthetic.truth import load_truth
from rigside.core.units.sorting import Sorting, SortingData, Unit
from rigside.sample_data import probe_demo_path


@pytest.fixture(scope="module")
def truth_sorting():
    """The probe demo's true spikes as an event table, sorted into their true units."""
    rec = open_recording(probe_demo_path())
    truth = load_truth(rec.truth_path())
    order = np.argsort(truth.sample, kind="stable")
    sample, unit = truth.sample[order], truth.unit[order]
    n = len(sample)
    channel = np.array([truth.unit_peak_channel[int(u)] for u in unit], dtype=np.int32)
    ev = EventTable(sample=sample, channel=channel, group=np.zeros(n, np.int32), amplitude_uv=-np.full(n, 80.0),
                    amplitude_sigma=np.full(n, 8.0), artefact=np.zeros(n, bool), rate_hz=rec.rate_hz,
                    n_samples=rec.n_samples, sigma_uv=np.full(rec.n_channels, 10.0), floor_sigma=4.0)
    ids = unit + 1                                       # unit ids start at 1
    data = SortingData.from_events(ev, np.zeros((n, 1), np.float32), ["f0"])
    sorting = Sorting(data, ids, {int(u): Unit(0) for u in np.unique(ids)}, next_id=int(ids.max()) + 1)
    yield rec, truth, ev, sorting
    rec.close()


def test_footprint_is_the_mean_waveform_on_the_neighbourhood_of_the_true_peak_site(truth_sorting):
    rec, truth, ev, sorting = truth_sorting
    params = Params()
    strongest = max(truth.unit_peak_uv, key=truth.unit_peak_uv.get)
    fp = unit_footprint(rec, ev, params, sorting, strongest + 1, n_events=50)
    assert fp.peak_channel == truth.unit_peak_channel[strongest]          # the scenario's ground truth
    # the neighbourhood: every site of the shank within the radius (brute-force distances, scipy's cdist)
    d = cdist(rec.positions[[fp.peak_channel]], rec.positions)[0]
    assert fp.channels.tolist() == np.flatnonzero(d <= params.probe.radius_um).tolist()
    rows = sorting.events_of(strongest + 1)
    picked = rows[spread_subsample(len(rows), 50)]
    snips, group = event_snippets(rec, ev, params, picked)                 # the direct computation
    np.testing.assert_allclose(fp.mean_uv, snips.astype(np.float64).mean(axis=0)[:, fp.channels], rtol=1e-6)
    assert fp.n_events == len(picked) and len(fp.times_ms) == fp.mean_uv.shape[0]
    assert fp.times_ms[0] < 0 < fp.times_ms[-1]
    # the largest excursion of the mean lies on the peak site, and is close to the unit's true size
    assert np.argmax(np.abs(fp.mean_uv).max(axis=0)) == fp.channels.tolist().index(fp.peak_channel)
    assert np.abs(fp.mean_uv).max() == pytest.approx(truth.unit_peak_uv[strongest], rel=0.35)


def test_footprint_needs_positions_and_events(truth_sorting):
    rec, truth, ev, sorting = truth_sorting
    empty = sorting.next_id
    sorting_without = Sorting(sorting.data, sorting.assignments, {**sorting.units, empty: Unit(0)},
                              next_id=empty + 1)
    with pytest.raises(RigsideError, match="must have events"):
        unit_footprint(rec, ev, Params(), sorting_without, empty)
    saved = rec.positions
    try:
        rec.positions = None                                 # as a bundle recording has
        with pytest.raises(RigsideError, match="site positions"):
            unit_footprint(rec, ev, Params(), sorting, 1)
    finally:
        rec.positions = saved


def test_sites_stack_by_shank_then_from_the_top_of_the_probe_down():
    positions = np.array([[0, 0], [20, 0], [0, 20], [20, 20], [0, 0], [0, 40]], dtype=float)
    shank = np.array([0, 0, 0, 0, 1, 1])
    got = site_order([5, 4, 3, 2, 1, 0], positions, shank).tolist()
    # Python's sort with the same key as the reference: shank, then y from large to small, then x
    want = sorted(range(6), key=lambda c: (shank[c], -positions[c, 1], positions[c, 0]))
    assert got == want == [2, 3, 0, 1, 5, 4]
    assert site_order([3, 0], positions, shank).tolist() == [3, 0]
