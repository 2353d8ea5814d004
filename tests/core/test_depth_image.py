"""The drift view's numbers: events gridded by time and depth, the largest amplitude per cell."""

import numpy as np
import pytest
from scipy import stats

from rigside.core.errors import RigsideError
from rigside.core.events import EventTable
from rigside.core.quality.depth_image import (
    MARGIN_UM,
    MAX_DEPTH_BINS,
    depth_bins,
    depth_image,
    event_depth_image,
)


def test_cells_hold_the_largest_amplitude_like_scipy_binned_statistic():
    rng = np.random.default_rng(0)
    n = 5000
    t, d, a = rng.uniform(0, 10, n), rng.uniform(0, 300, n), -rng.uniform(20, 200, n)
    img = depth_image(t, d, a, (0.0, 10.0), (0.0, 300.0), time_bins=50, n_depth_bins=30)
    # reference implementation: scipy.stats.binned_statistic_2d with statistic "max" (NaN in empty cells)
    ref = stats.binned_statistic_2d(t, d, np.abs(a), "max", bins=[50, 30], range=[[0, 10], [0, 300]]).statistic
    np.testing.assert_allclose(img.values, ref, rtol=1e-6)
    assert img.n_events == n and img.values.dtype == np.float32
    assert img.levels == pytest.approx(tuple(np.percentile(np.abs(a), [1, 99])))


def test_events_outside_the_span_are_left_out_and_empty_cells_are_nan():
    t = np.array([0.5, 1.5, 2.5, 9.0])
    d = np.array([10.0, 10.0, 50.0, 10.0])
    img = depth_image(t, d, np.array([-30.0, 80.0, -40.0, -99.0]), (0.0, 3.0), (0.0, 60.0), 3, 6)
    assert img.n_events == 3
    assert img.values[0, 1] == 30.0 and img.values[1, 1] == 80.0 and img.values[2, 5] == 40.0   # magnitudes
    assert np.isnan(img.values).sum() == 18 - 3          # a lone event is its own cell, the rest stay empty


def test_a_million_events_give_a_bounded_image():
    rng = np.random.default_rng(1)
    n = 1_000_000
    img = depth_image(np.sort(rng.uniform(0, 3600, n)), rng.uniform(0, 3840, n), rng.normal(-60, 20, n),
                      (0.0, 3600.0), (0.0, 3840.0))
    assert img.values.shape == (1000, MAX_DEPTH_BINS) and img.n_events == n
    assert depth_bins((0.0, 100.0)) == 50                  # 2 um bins on a short shank


def test_bad_spans_and_bins_are_refused():
    one = np.ones(1)
    with pytest.raises(RigsideError, match="time range"):
        depth_image(one, one, one, (2.0, 1.0), (0.0, 1.0))
    with pytest.raises(RigsideError, match="bins"):
        depth_image(one, one, one, (0.0, 2.0), (0.0, 2.0), time_bins=0)
    with pytest.raises(RigsideError, match="one entry per event"):
        depth_image(one, np.ones(2), one, (0.0, 2.0), (0.0, 2.0))


def test_event_image_keeps_one_shank_at_the_threshold():
    rate = 1000.0
    ev = EventTable(sample=np.array([100, 200, 300, 400]), channel=np.array([0, 1, 2, 0]),
                    group=np.array([0, 0, 1, 0]), amplitude_uv=np.array([-50.0, -20.0, -90.0, -70.0]),
                    amplitude_sigma=np.array([5.0, 2.0, 9.0, 7.0]), artefact=np.array([False, False, False, True]),
                    rate_hz=rate, n_samples=1000, sigma_uv=np.full(3, 10.0), floor_sigma=1.0,
                    x_um=np.zeros(4), y_um=np.array([15.0, 25.0, 40.0, 5.0]))
    img = event_depth_image(ev, np.array([0, 1]), np.array([0.0, 20.0]), 4.0, (0.0, 1.0), time_bins=10)
    # channel 1 is below the threshold, channel 2 is on another shank, the last event is an artefact
    assert img.n_events == 1 and np.nanmax(img.values) == 50.0
    assert img.depth_range == (-MARGIN_UM, 20.0 + MARGIN_UM)
    near = event_depth_image(ev, np.array([0, 1]), np.array([0.0, 20.0]), 4.0, (0.0, 1.0), 10, 5, (12.0, 99.0))
    assert near.depth_range == (12.0, 20.0 + MARGIN_UM) and near.n_events == 1 and near.values.shape == (10, 5)
    outside = event_depth_image(ev, np.array([0, 1]), np.array([0.0, 20.0]), 4.0, (0.0, 1.0), 10, 5, (100.0, 120.0))
    assert outside.depth_range == img.depth_range              # no overlap: the shank's whole span
    bundle = ev.subset(np.ones(4, bool))
    bundle.x_um = bundle.y_um = None
    with pytest.raises(RigsideError, match="positions"):
        event_depth_image(bundle, np.array([0]), np.array([0.0]), 4.0, (0.0, 1.0))
