import numpy as np
import pytest
from scipy import integrate, signal, stats

from core.rice import crossing_frequency, neighbour_correlation, rice_rate, sampled_crossing_rate

FS = 30000.0
SOS = signal.butter(3, [300, 6000], "bandpass", fs=FS, output="sos")


def test_crossing_frequency_of_the_butterworth_band():
    # CHECKS.md s3 (Rice 1944/45): order-3 Butterworth 300-6000 Hz: f0 = 3814.3 Hz single pass,
    # 3363.8 Hz forward-backward.
    assert crossing_frequency(SOS, FS, zero_phase=False) == pytest.approx(3814.3, abs=0.5)
    assert crossing_frequency(SOS, FS, zero_phase=True) == pytest.approx(3363.8, abs=0.5)


def test_ideal_band_formula():
    # Rice: for an ideal flat band f1..f2, f0 = sqrt((f2^3 - f1^3) / (3 (f2 - f1))) = 3553.9 Hz.
    # A Butterworth approaches the ideal band as its order grows.
    f1, f2 = 300.0, 6000.0
    ideal = np.sqrt((f2 ** 3 - f1 ** 3) / (3 * (f2 - f1)))
    assert ideal == pytest.approx(3553.9, abs=0.1)
    f0 = [crossing_frequency(signal.butter(n, [f1, f2], "bandpass", fs=FS, output="sos"), FS) for n in (3, 8, 16)]
    assert f0[0] < f0[1] < f0[2] < ideal and f0[2] == pytest.approx(ideal, rel=0.02)


def test_neighbour_correlation_and_sampled_rates():
    # CHECKS.md s3: rho1 = 0.77015; sampled rates 30.82, 5.74, 0.828, 0.093 /s at k = 3..4.5;
    # Rice (continuous) 37.37, 7.36, 1.128, 0.135 /s.
    assert neighbour_correlation(SOS, FS) == pytest.approx(0.77015, abs=1e-4)
    k = np.array([3.0, 3.5, 4.0, 4.5])
    np.testing.assert_allclose(sampled_crossing_rate(SOS, FS, k), [30.82, 5.74, 0.828, 0.0927], rtol=3e-3)
    np.testing.assert_allclose(rice_rate(SOS, FS, k), [37.37, 7.36, 1.128, 0.1348], rtol=3e-3)


def test_bivariate_term_by_independent_integration():
    # Phi2(-k,-k; rho) checked by direct numerical integration of the bivariate normal density
    rho, k = neighbour_correlation(SOS, FS), 3.0
    dens = lambda y, x: np.exp(-(x * x - 2 * rho * x * y + y * y) / (2 * (1 - rho ** 2))) / (2 * np.pi * np.sqrt(1 - rho ** 2))
    both, _ = integrate.dblquad(dens, -12, -k, -12, -k)
    want = FS * (stats.norm.cdf(-k) - both)
    assert float(sampled_crossing_rate(SOS, FS, k)) == pytest.approx(want, rel=1e-4)
