"""The detection trade-off against ground truth: counts, scoring, the noise-only rate and where units
start to be missed (invented practice recordings, for ground-truth checks only)."""

from __future__ import annotations

import csv

import numpy as np
import pytest
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import maximum_bipartite_matching

from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.signal.filtering import design_bandpass
from rigside.core.signal.pipeline import detect
from rigside.core.synthetic.settings import SynthSettings
from rigside.core.synthetic.synth import write_practice
from rigside.core.synthetic.tradeoff import (
    CSV_COLUMNS,
    MISS_ONSET_FRACTION,
    miss_onsets,
    tradeoff_curve,
    write_tradeoff_csv,
)
from rigside.core.synthetic.truth import load_truth, score_curve

TOL_MS = 0.5


def _practice(folder, settings: SynthSettings, floor: float = 3.0):
    path = folder / "p.bin"
    write_practice(path, settings)
    rec = open_recording(path)
    params = Params()
    params.detect.threshold_sigma = floor
    events = detect(rec, params)
    return rec, params, events, load_truth(rec.truth_path())


@pytest.fixture(scope="module")
def practice(tmp_path_factory):
    # 3 bundles, units spread 2 / 2 / 1, SNR 5-10 so that every unit is missed somewhere above the floor
    s = SynthSettings(seconds=30.0, channels=12, units=5, snr=(5.0, 10.0), artefacts_per_min=2.0, seed=1)
    rec, params, events, truth = _practice(tmp_path_factory.mktemp("tradeoff"), s)
    yield rec, params, events, truth
    rec.close()


def _brute_force_hits(det: np.ndarray, true: np.ndarray, tol: float) -> int:
    """Largest one-to-one pairing of events and true spikes within ``tol`` samples
    (reference implementation: scipy.sparse.csgraph.maximum_bipartite_matching)."""
    if not len(det) or not len(true):
        return 0
    lo = np.searchsorted(true, det - tol, side="left")
    hi = np.searchsorted(true, det + tol, side="right")
    rows = np.repeat(np.arange(len(det)), hi - lo)
    cols = np.concatenate([np.arange(a, b) for a, b in zip(lo, hi)]) if len(rows) else np.zeros(0, int)
    graph = csr_matrix((np.ones(len(rows)), (rows, cols)), shape=(len(det), len(true)))
    return int(np.sum(maximum_bipartite_matching(graph, perm_type="column") >= 0))


@pytest.mark.parametrize("k", [3.5, 4.5, 6.0])
def test_points_equal_a_fresh_detection_and_a_brute_force_match(practice, k):
    rec, params, events, truth = practice
    sos = design_bandpass(params.filter, rec.rate_hz)
    fresh_params = Params()
    fresh_params.detect.threshold_sigma = k
    fresh = detect(rec, fresh_params)
    tol = TOL_MS * rec.rate_hz / 1000
    for g, chans in enumerate(rec.groups):
        curve = tradeoff_curve(events, truth, [3.0, k, 9.0], chans, sos, TOL_MS)
        i = curve.nearest(k)
        sel = ~fresh.artefact & (fresh.group == g)
        n_events = int(sel.sum())
        assert curve.events_per_s[i] * curve.duration_s == pytest.approx(n_events)
        units = [u for u in truth.unit_group if truth.unit_group[u] == g]
        true = truth.sample[np.isin(truth.unit, units)]
        hits = _brute_force_hits(fresh.sample[sel].astype(float), true.astype(float), tol)
        assert (curve.hits[i], curve.misses[i], curve.false_alarms[i]) == (hits, len(true) - hits, n_events - hits)


def test_events_in_a_group_without_true_units_are_false_alarms(tmp_path):
    rec, params, events, truth = _practice(tmp_path, SynthSettings(seconds=8.0, channels=8, units=1, seed=2))
    try:
        sos = design_bandpass(params.filter, rec.rate_hz)
        empty = rec.groups[1]
        k = np.array([3.0, 3.5, 4.0])
        curve = tradeoff_curve(events, truth, k, empty, sos)
        assert np.all(curve.hits == 0) and np.all(curve.misses == 0)
        assert np.all(curve.false_alarms == np.round(curve.events_per_s * curve.duration_s))
        assert curve.false_alarms[0] > 0 and np.all(np.isnan(curve.miss_fraction))
        direct = score_curve(events, truth, k, channels=empty)
        np.testing.assert_array_equal(direct.false_alarms, curve.false_alarms)
    finally:
        rec.close()


def test_noise_only_false_alarms_match_the_sampled_rice_rate(tmp_path):
    # Rice 1944/45 in its sampled-data form (CHECKS 3): fs [Phi(-k) - Phi2(-k, -k; rho1)] per channel;
    # counts are Poisson, so the measured count must lie within 3 standard deviations of the expected one
    s = SynthSettings(seconds=40.0, channels=16, units=0, noise_colour="white", hum_uv=0.0, drift_uv=0.0,
                      artefacts_per_min=0.0, seed=5)
    rec, params, events, truth = _practice(tmp_path, s, floor=3.5)
    try:
        sos = design_bandpass(params.filter, rec.rate_hz)
        k = np.array([3.5, 4.0, 4.5])
        expected = np.zeros(3)
        measured = np.zeros(3)
        for chans in rec.groups:
            curve = tradeoff_curve(events, truth, k, chans, sos)
            expected += curve.expected_noise_per_s * curve.duration_s
            measured += curve.false_alarms
            assert np.all(curve.hits == 0)
        assert expected[2] > 50    # enough events at 4.5 sigma for the Poisson band to mean something
        assert np.all(np.abs(measured - expected) <= 3 * np.sqrt(expected)), (measured, expected)
    finally:
        rec.close()


def test_units_start_to_be_missed_where_their_misses_rise(practice):
    rec, params, events, truth = practice
    grid = np.round(np.arange(3.0, 14.01, 0.05), 4)
    checked = 0
    for chans in rec.groups:
        for onset in miss_onsets(events, truth, chans, TOL_MS):
            assert not onset.reason, onset.reason
            s = score_curve(events, truth, grid, tolerance_ms=TOL_MS, units=[onset.unit])
            lost = s.misses / (s.hits + s.misses)
            rise = lost - lost[0]        # spikes lost already at the floor (overlaps, timing) do not count
            measured = grid[np.argmax(rise >= MISS_ONSET_FRACTION)]
            assert onset.onset_sigma == pytest.approx(measured, abs=0.35), (onset, measured)
            middle = grid[(rise > 0.1) & (rise < 0.9)]
            if len(middle):   # the fitted Gaussian follows the measured misses through the middle
                assert np.max(np.abs(onset.missed_at(middle) - rise[(rise > 0.1) & (rise < 0.9)])) < 0.1
            checked += 1
    assert checked == 5


def test_tradeoff_csv_holds_the_curve(practice, tmp_path):
    rec, params, events, truth = practice
    sos = design_bandpass(params.filter, rec.rate_hz)
    curve = tradeoff_curve(events, truth, np.linspace(3, 8, 11), rec.groups[0], sos)
    path = write_tradeoff_csv(tmp_path / "t.csv", curve)
    rows = list(csv.DictReader(open(path, newline="", encoding="utf-8")))
    assert tuple(rows[0]) == CSV_COLUMNS and len(rows) == 11
    assert [int(r["hits"]) for r in rows] == curve.hits.tolist()
    assert [int(r["false_alarms"]) for r in rows] == curve.false_alarms.tolist()
    np.testing.assert_allclose([float(r["expected_noise_per_s"]) for r in rows], curve.expected_noise_per_s,
                               rtol=1e-5)
    assert [p.name for p in tmp_path.iterdir()] == ["t.csv"]   # no temporary left behind
