import numpy as np
import pytest
from scipy import integrate, signal, stats
from scipy.special import owens_t as reference_owens_t

from rigside.core.signal.rice import (
    crossing_frequency,
    neighbour_correlation,
    owens_t,
    rice_rate,
    sampled_crossing_rate,
)

FS = 30000.0
SOS = signal.butter(3, [300, 6000], "bandpass", fs=FS, output="sos")


def spectral_moment(p: int, weight=lambda f: 1.0) -> float:
    """Integral over 0..fs/2 of weight(f) |H(f)|^p, by scipy.integrate.quad over scipy.signal.sosfreqz."""
    def integrand(f):
        return weight(f) * abs(signal.sosfreqz(SOS, worN=[f], fs=FS)[1][0]) ** p
    value, _ = integrate.quad(integrand, 0.0, FS / 2, points=[300.0, 6000.0], limit=400, epsabs=0, epsrel=1e-10)
    return value


def recomputed(zero_phase: bool):
    """f0 and rho1 of white noise through the filter, from adaptive integration (independent of
    the FFT grid and trapezoid rule the code uses)."""
    p = 4 if zero_phase else 2
    lam0 = spectral_moment(p)
    lam2 = spectral_moment(p, lambda f: (2 * np.pi * f) ** 2)
    rho = spectral_moment(p, lambda f: np.cos(2 * np.pi * f / FS)) / lam0
    return np.sqrt(lam2 / lam0) / (2 * np.pi), rho


def test_crossing_frequency_of_the_butterworth_band():
    # Rice 1944/45: f0 = sqrt(lambda2 / lambda0) / (2 pi), recomputed here with scipy.integrate
    for zero_phase, printed in ((False, 3814.3), (True, 3363.8)):
        f0, _ = recomputed(zero_phase)
        assert crossing_frequency(SOS, FS, zero_phase=zero_phase) == pytest.approx(f0, rel=1e-6)
        assert f0 == pytest.approx(printed, abs=0.05)   # CHECKS.md s3, as printed there


def test_ideal_band_formula():
    # Rice: for an ideal flat band f1..f2, f0 = sqrt((f2^3 - f1^3) / (3 (f2 - f1))) = 3553.9 Hz.
    # A Butterworth approaches the ideal band as its order grows.
    f1, f2 = 300.0, 6000.0
    ideal = np.sqrt((f2 ** 3 - f1 ** 3) / (3 * (f2 - f1)))
    assert ideal == pytest.approx(3553.9, abs=0.1)
    f0 = [crossing_frequency(signal.butter(n, [f1, f2], "bandpass", fs=FS, output="sos"), FS) for n in (3, 8, 16)]
    assert f0[0] < f0[1] < f0[2] < ideal and f0[2] == pytest.approx(ideal, rel=0.02)


def test_neighbour_correlation_and_sampled_rates():
    # Rice (continuous) nu = f0 exp(-k^2/2); sampled fs [Phi(-k) - Phi2(-k, -k; rho1)] with
    # rho1 from scipy.integrate and Phi, Phi2 from scipy.stats (norm, multivariate_normal)
    f0, rho = recomputed(True)
    assert neighbour_correlation(SOS, FS) == pytest.approx(rho, abs=1e-7)
    k = np.array([3.0, 3.5, 4.0, 4.5])
    mvn = stats.multivariate_normal(mean=[0.0, 0.0], cov=[[1.0, rho], [rho, 1.0]])
    sampled = FS * (stats.norm.cdf(-k) - np.array([mvn.cdf([-x, -x]) for x in k]))
    rice = f0 * np.exp(-k ** 2 / 2)
    np.testing.assert_allclose(sampled_crossing_rate(SOS, FS, k), sampled, rtol=1e-4)
    np.testing.assert_allclose(rice_rate(SOS, FS, k), rice, rtol=1e-6)
    # CHECKS.md s3, as printed there: rho1 = 0.77015; sampled 30.82, 5.74, 0.828, 0.093 /s;
    # Rice 37.37, 7.36, 1.128, 0.135 /s
    assert rho == pytest.approx(0.77015, abs=1e-5)
    np.testing.assert_allclose(sampled, [30.82, 5.74, 0.828, 0.093], rtol=5e-3)
    np.testing.assert_allclose(rice, [37.37, 7.36, 1.128, 0.135], rtol=2e-3)


def test_bivariate_term_by_independent_integration():
    # Phi2(-k,-k; rho) checked by direct numerical integration of the bivariate normal density
    rho, k = neighbour_correlation(SOS, FS), 3.0
    dens = lambda y, x: (np.exp(-(x * x - 2 * rho * x * y + y * y) / (2 * (1 - rho ** 2)))
                         / (2 * np.pi * np.sqrt(1 - rho ** 2)))
    both, _ = integrate.dblquad(dens, -12, -k, -12, -k)
    want = FS * (stats.norm.cdf(-k) - both)
    assert float(sampled_crossing_rate(SOS, FS, k)) == pytest.approx(want, rel=1e-4)


def test_owens_t_equals_scipy():
    # reference implementation: scipy.special.owens_t (Owen 1956); h over both signs and far into the tail,
    # a below, at and above 1 (the identity branch) and negative
    h = np.concatenate([np.linspace(-5, 40, 451), [0.0, 1e-8, 1e-3]])
    for a in (0.0, 0.01, 0.3, 0.9, 1.0, 1.5, 10.0, 1e4, -0.4, -2.0):
        want, got = reference_owens_t(h, a), owens_t(h, a)
        np.testing.assert_allclose(got, want, rtol=1e-11, atol=1e-300)
