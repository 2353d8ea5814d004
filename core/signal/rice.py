"""Expected noise-only threshold crossing rates for the filter actually used.

Rice (1944/45, Bell System Technical Journal 23:282-332, 24:46-156): Gaussian noise with
spectral moments lambda0, lambda2 crosses a level k sigma downward at
nu = (1/2pi) sqrt(lambda2/lambda0) exp(-k^2/2) per second. A detector that looks at
samples sees fewer crossings: the rate is fs [Phi(-k) - Phi2(-k, -k; rho1)] with rho1 the
correlation of neighbouring samples (the discrete-time form; it tends to Rice's formula
as fs grows). For forward-backward filtering the power response is |H|^4.

With equal levels the bivariate term has a closed form in Owen's T function (Owen 1956, Ann.
Math. Stat. 27:1075-1090): Phi(-k) - Phi2(-k, -k; rho) = 2 T(k, sqrt((1 - rho) / (1 + rho))),
computed here by quadrature (:func:`owens_t`, checked against ``scipy.special.owens_t``), so the
window that opens a session draws the noise-only curve without importing SciPy.
"""

from __future__ import annotations

import math

import numpy as np

_NODES, _WEIGHTS = np.polynomial.legendre.leggauss(48)
_REACH = 12.0
"""Beyond this many standard deviations of its Gaussian factor the integrand of T is below 1e-31 of its peak."""
_upper_tail = np.frompyfunc(lambda x: 0.5 * math.erfc(x / math.sqrt(2.0)), 1, 1)


def owens_t(h, a: float) -> np.ndarray:
    """Owen's T function, T(h, a) = (1/2pi) int_0^a exp(-h^2 (1 + x^2) / 2) / (1 + x^2) dx (Owen 1956).

    Parameters
    ----------
    h
        Array of h (T is even in h).
    a
        One value of a.

    Returns
    -------
    numpy.ndarray
        T for each h: 48-point Gauss-Legendre quadrature over [0, min(a, 12 / h)] for ``|a| <= 1``;
        for ``a > 1`` Owen's identity T(h, a) = Q(h)/2 + Q(ah)/2 - Q(h) Q(ah) - T(ah, 1/a), with Q the upper
        normal tail (``math.erfc``).
    """
    h = np.abs(np.asarray(h, dtype=np.float64))
    a = float(a)
    if a < 0:
        return -owens_t(h, -a)
    if a > 1:
        qh, qa = _upper_tail(h).astype(np.float64), _upper_tail(a * h).astype(np.float64)
        return 0.5 * qh + 0.5 * qa - qh * qa - owens_t(a * h, 1.0 / a)
    top = np.minimum(a, _REACH / np.maximum(h, 1e-300))
    x = 0.5 * top[..., None] * (_NODES + 1.0)
    f = np.exp(-0.5 * h[..., None] ** 2 * (1.0 + x * x)) / (1.0 + x * x)
    return 0.5 * top * (f @ _WEIGHTS) / (2.0 * np.pi)


def _power_response(sos: np.ndarray, rate_hz: float, zero_phase: bool, n: int = 1 << 16):
    """Power response of the second-order sections on ``n`` frequencies from 0 up to (not
    including) Nyquist, the grid of ``scipy.signal.sosfreqz(sos, worN=n)``."""
    f = np.arange(n) * (rate_hz / 2 / n)
    z1 = np.exp(-1j * np.pi * np.arange(n) / n)            # z^-1 on the unit circle
    h = np.ones(n, dtype=np.complex128)
    for b0, b1, b2, a0, a1, a2 in np.asarray(sos, dtype=np.float64):
        h *= (b0 + z1 * (b1 + z1 * b2)) / (a0 + z1 * (a1 + z1 * a2))
    p = np.abs(h) ** (4 if zero_phase else 2)
    return f, p


def crossing_frequency(sos: np.ndarray, rate_hz: float, zero_phase: bool = True) -> float:
    """f0 = sqrt(lambda2 / lambda0) / (2 pi) of white noise through the filter (Hz)."""
    f, p = _power_response(sos, rate_hz, zero_phase)
    lam0 = np.trapezoid(p, f)
    lam2 = np.trapezoid((2 * np.pi * f) ** 2 * p, f)
    return float(np.sqrt(lam2 / lam0) / (2 * np.pi))


def rice_rate(sos: np.ndarray, rate_hz: float, k_sigma, zero_phase: bool = True) -> np.ndarray:
    """Continuous-time Rice rate of crossings of one level, per second."""
    k = np.asarray(k_sigma, dtype=np.float64)
    return crossing_frequency(sos, rate_hz, zero_phase) * np.exp(-k ** 2 / 2)


def neighbour_correlation(sos: np.ndarray, rate_hz: float, zero_phase: bool = True) -> float:
    """Correlation of neighbouring samples of filtered white noise."""
    f, p = _power_response(sos, rate_hz, zero_phase)
    return float(np.trapezoid(p * np.cos(2 * np.pi * f / rate_hz), f) / np.trapezoid(p, f))


def sampled_crossing_rate(sos: np.ndarray, rate_hz: float, k_sigma, zero_phase: bool = True) -> np.ndarray:
    """Rate (per second) at which sampled filtered Gaussian noise crosses k sigma in one
    direction: fs [Phi(-k) - Phi2(-k, -k; rho1)]."""
    k = np.atleast_1d(np.asarray(k_sigma, dtype=np.float64))
    rho = neighbour_correlation(sos, rate_hz, zero_phase)
    out = np.maximum(rate_hz * 2.0 * owens_t(k, np.sqrt((1.0 - rho) / (1.0 + rho))), 0.0)
    return out if np.ndim(k_sigma) else out[0]
