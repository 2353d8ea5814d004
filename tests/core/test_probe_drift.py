"""Drift along the probe on a synthetic probe whose units all move 30 um over the recording (invented
data, `write_probe_synth(..., drift_um=30)`): the unit table's drift (Theil–Sen slope of event y_um
against time) lies within 20% of the true movement (the probe issue's figure), in either direction, for
units of SNR >= 8 whose peak site's neighbourhood stays whole along their path (a probe end cuts it
within one radius: the centre of mass cannot follow a unit off the last sites)."""

from __future__ import annotations

import numpy as np
import pytest

from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.quality.unit_table import unit_metrics_for_events
from rigside.core.signal.pipeline import detect
from rigside.core.synthetic.probe_score import score_probe
from rigside.core.synthetic.probe_synth import site_gains, write_probe_synth
from rigside.core.synthetic.truth import load_truth

SECONDS, DRIFT_UM, PITCH, RADIUS = 8.0, 30.0, 20.0, 50.0


@pytest.fixture(scope="module", params=[DRIFT_UM, -DRIFT_UM], ids=["up", "down"])
def drifting(request, tmp_path_factory):
    path = tmp_path_factory.mktemp("drift") / "drift.bin"
    sc = write_probe_synth(path, seconds=SECONDS, sites=32, columns=2, pitch_um=PITCH, drift_um=request.param,
                           seed=0)
    rec = open_recording(path)
    ev = detect(rec, Params())
    return sc, rec, ev, load_truth(rec.truth_path())


def true_positions(sc):
    xy = np.empty((len(sc.spike_sample), 2))
    for u in range(len(sc.units)):
        mine = sc.spike_unit == u
        xy[mine, 0], xy[mine, 1] = sc.unit_position(u, sc.spike_sample[mine])
    return xy


def test_drift_of_a_unit_moved_30_um_is_within_20_percent_of_the_truth(drifting):
    sc, rec, ev, truth = drifting
    scored = ev.subset(ev.mask(threshold_sigma=Params().detect.threshold_sigma))
    s = score_probe(scored, rec.positions, sc.spike_sample, sc.spike_unit, true_positions(sc), radius_um=RADIUS)
    table = unit_metrics_for_events(scored, s.event_unit, None, Params().detect.threshold_sigma)
    row = {int(u): i for i, u in enumerate(table["unit"])}
    truth_per_min = sc.drift_um / (SECONDS / 60.0)
    ends = rec.positions[:, 1].min() + RADIUS, rec.positions[:, 1].max() - RADIUS
    ratios = []
    for u in sc.units:
        if truth.unit_peak_uv[u.unit] / ev.sigma_uv[truth.unit_peak_channel[u.unit]] < 8:
            continue
        mine = sc.spike_unit == u.unit
        _, path = sc.unit_position(u.unit, sc.spike_sample[mine])
        peaks = rec.positions[np.argmax(site_gains(rec.positions, rec.shank, u.shank, u.x_um, path), axis=1), 1]
        if peaks.min() < ends[0] or peaks.max() > ends[1]:
            continue                       # the neighbourhood is cut by a probe end somewhere on the path
        got = table["drift_um_per_min"][row[u.unit]]
        assert got == pytest.approx(truth_per_min, rel=0.2), (u.unit, got, truth_per_min)
        ratios.append(got / truth_per_min)
    assert len(ratios) >= 4, ratios
    assert abs(np.median(ratios) - 1) <= 0.1, ratios
