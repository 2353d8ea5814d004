"""Expected noise-only threshold crossing rates for the filter actually used.

Rice (1944/45, Bell System Technical Journal 23:282-332, 24:46-156): Gaussian noise with
spectral moments lambda0, lambda2 crosses a level k sigma downward at
nu = (1/2pi) sqrt(lambda2/lambda0) exp(-k^2/2) per second. A detector that looks at
samples sees fewer crossings: the rate is fs [Phi(-k) - Phi2(-k, -k; rho1)] with rho1 the
correlation of neighbouring samples (the discrete-time form; it tends to Rice's formula
as fs grows). For forward-backward filtering the power response is |H|^4.
"""

from __future__ import annotations

import numpy as np
from scipy import signal, stats


def _power_response(sos: np.ndarray, rate_hz: float, zero_phase: bool, n: int = 1 << 16):
    f, h = signal.sosfreqz(sos, worN=n, fs=rate_hz)
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
    mvn = stats.multivariate_normal(mean=[0.0, 0.0], cov=[[1.0, rho], [rho, 1.0]])
    both = np.atleast_1d(mvn.cdf(np.column_stack([-k, -k])))
    out = np.maximum(rate_hz * (stats.norm.cdf(-k) - both), 0.0)
    return out if np.ndim(k_sigma) else out[0]
