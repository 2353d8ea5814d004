"""Detection against the known truth of the synthetic demo scenario (invented data)."""

import numpy as np
import pytest

from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.signal.pipeline import detect
from rigside.core.synthetic.synth import make_scenario, write_synth
from rigside.core.synthetic.truth import load_truth, score_curve


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    path = tmp_path_factory.mktemp("gt") / "demo.bin"
    write_synth(path, seconds=20, channels=16, seed=3)
    rec = open_recording(path)
    params = Params()
    params.detect.floor_sigma = 3.0
    return rec, detect(rec, params), load_truth(rec.truth_path())


def test_recall_and_precision_at_the_default_threshold(demo):
    rec, ev, truth = demo
    strong = [u for u in truth.unit_group
              if truth.unit_peak_uv[u] >= 5 * ev.sigma_uv[truth.unit_peak_channel[u]]]
    assert len(strong) >= 10
    s = score_curve(ev, truth, [4.5], units=strong)
    recall = s.hits[0] / (s.hits[0] + s.misses[0])
    everything = score_curve(ev, truth, [4.5])
    precision = everything.hits[0] / (everything.hits[0] + everything.false_alarms[0])
    assert recall >= 0.95, recall
    assert precision >= 0.98, precision


def test_counts_fall_and_false_alarms_grow_as_threshold_drops(demo):
    rec, ev, truth = demo
    k = np.linspace(3.0, 10.0, 29)
    s = score_curve(ev, truth, k)
    total = s.hits + s.false_alarms
    assert np.all(np.diff(total) <= 0)
    assert np.all(np.diff(s.false_alarms) <= 0) and s.false_alarms[0] > 10 * max(1, s.false_alarms[8])


def test_artefacts_are_flagged_at_the_true_times(demo):
    rec, ev, truth = demo
    sc = make_scenario(20, 16, 3)
    assert len(sc.artefact_sample) >= 1
    for a in sc.artefact_sample:
        near = np.abs(ev.sample - (a + 10)) < 60
        assert ev.artefact[near].any()


def test_synth_is_deterministic_and_any_size(tmp_path):
    a = make_scenario(3, 6, seed=9)
    b = make_scenario(3, 6, seed=9)
    np.testing.assert_array_equal(a.spike_sample, b.spike_sample)
    assert [len(g) for g in a.groups] == [4, 2]
    write_synth(tmp_path / "x.bin", 0.5, 5, seed=1, rate_hz=20000.0)
    rec = open_recording(tmp_path / "x.bin")
    assert rec.n_channels == 5 and rec.n_samples == 10000 and rec.rate_hz == 20000.0
    c = make_scenario(3, 6, seed=10)
    assert not np.array_equal(a.spike_sample[:20], c.spike_sample[:20])


def test_demo_scenario_content():
    sc = make_scenario(60, 16, seed=0)
    kinds = [u.kind for u in sc.units]
    assert len(sc.units) == 12 and len(sc.groups) == 4
    assert kinds.count("bursting") == 1 and kinds.count("drifting") == 1 and kinds.count("look-alike") == 2
    rates = np.bincount(sc.spike_unit, minlength=12) / 60
    assert rates.min() >= 0.3 and rates.max() <= 60
    # every train respects a 2 ms refractory period
    for u in range(12):
        assert np.diff(sc.spike_sample[sc.spike_unit == u]).min() >= 0.002 * 30000 - 1
    # facts of the trade (common practice, no source): spikes 50-200 uV, about 1-2 ms long
    amps = [u.amplitude_uv for u in sc.units]
    assert min(amps) >= 40 and max(amps) <= 220
