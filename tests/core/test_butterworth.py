"""The in-house band-pass design against scipy.signal.butter, the reference implementation."""

import numpy as np
import pytest
from scipy import signal

from rigside.core.signal.butterworth import bandpass_sos
from rigside.core.signal.filtering import settle_samples

BANDS = [(300, 6000, 30000), (300, 3000, 20000), (500, 9000, 25000), (1, 100, 1000), (600, 6000, 40000),
         (300, 14000, 30000), (5000, 6000, 30000), (250, 7500, 30000)]


@pytest.mark.parametrize("order", [1, 2, 3, 4, 5, 8])
@pytest.mark.parametrize("low, high, rate", BANDS)
def test_sections_equal_scipy_butter(order, low, high, rate):
    # scipy.signal.butter(..., btype="bandpass", output="sos") as the reference: same sections,
    # same order and gain placement, to rounding (bitwise on the versions tried)
    want = signal.butter(order, [low, high], btype="bandpass", fs=rate, output="sos")
    got = bandpass_sos(order, low, high, rate)
    assert got.shape == want.shape
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-15)


def test_response_is_a_butterworth_band():
    # Butterworth: |H| = 1/sqrt(2) at both band edges (-3 dB) and 1 at the band's geometric
    # centre of the pre-warped edges; scipy.signal.sosfreqz as the reference evaluation
    sos = bandpass_sos(3, 300, 6000, 30000)
    _, h = signal.sosfreqz(sos, worN=[300.0, 6000.0], fs=30000)
    np.testing.assert_allclose(np.abs(h), 1 / np.sqrt(2), rtol=1e-9)


def test_settle_samples_from_the_poles_of_scipy():
    # the slowest pole's decay, with the poles from scipy.signal.sos2zpk
    for order in (1, 3, 6):
        sos = signal.butter(order, [300, 6000], btype="bandpass", fs=30000, output="sos")
        _, poles, _ = signal.sos2zpk(sos)
        r = float(np.max(np.abs(poles)))
        assert settle_samples(sos) == max(64, int(np.ceil(np.log(1e-9) / np.log(r))))


@pytest.mark.parametrize("args", [(0, 300, 6000, 30000), (3, 0, 6000, 30000), (3, 6000, 300, 30000),
                                  (3, 300, 15000, 30000), (3, 300, 6000, -1.0)])
def test_impossible_bands_are_refused(args):
    with pytest.raises(ValueError):
        bandpass_sos(*args)
