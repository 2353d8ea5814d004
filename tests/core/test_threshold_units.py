"""One conversion of a microvolt threshold into sigma multiples, used by detection, the event
table and the window (common practice, no source: threshold / noise sigma, dead channels never cross)."""

import numpy as np

from rigside.core.events import uv_to_sigma
from rigside.core.params import Params
from rigside.core.signal.pipeline import thresholds_sigma


def test_microvolts_become_sigma_multiples_and_dead_channels_never_cross():
    sigma = np.array([10.0, 0.0, 4.0])
    np.testing.assert_allclose(uv_to_sigma(50.0, sigma), [5.0, np.inf, 12.5])
    np.testing.assert_allclose(uv_to_sigma([20.0, 20.0, 2.0], sigma), [2.0, np.inf, 0.5])


def test_detection_parameters_in_microvolts():
    params = Params()
    params.detect.threshold_uv = 30.0
    sigma = np.array([6.0, 0.0, 15.0])
    np.testing.assert_allclose(thresholds_sigma(params, sigma), [5.0, np.inf, 2.0])
