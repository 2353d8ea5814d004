"""Digital Butterworth band-pass design as second-order sections, with numpy only.

The classical steps (Oppenheim & Schafer, *Discrete-Time Signal Processing*, ch. 7): the analogue
prototype's poles on the unit circle, the low-pass to band-pass transform around the pre-warped band
edges, the bilinear transform, then zeros and poles paired into sections, the poles nearest the unit
circle last. Done in the order ``scipy.signal.butter(..., output="sos")`` does them, so the sections are
the same to rounding (``tests/core/test_butterworth.py`` checks it against scipy); written here because
importing ``scipy.signal`` costs seconds on every start of a command or the window.
"""

from __future__ import annotations

import numpy as np


def bandpass_sos(order: int, low_hz: float, high_hz: float, rate_hz: float) -> np.ndarray:
    """Second-order sections of a digital Butterworth band-pass.

    Parameters
    ----------
    order
        Order of the low-pass prototype (the band-pass has twice as many poles).
    low_hz, high_hz
        Band edges (Hz), ``0 < low_hz < high_hz < rate_hz / 2``.
    rate_hz
        Sampling rate (Hz).

    Returns
    -------
    numpy.ndarray
        ``(order, 6)`` array of sections ``b0 b1 b2 a0 a1 a2``, the gain in the first one.
    """
    if order < 1 or not 0 < low_hz < high_hz < rate_hz / 2:
        raise ValueError(f"a band-pass needs order >= 1 and 0 < low < high < Nyquist, got order {order}, "
                         f"band {low_hz}-{high_hz} Hz at {rate_hz} Hz")
    m = np.arange(-order + 1, order, 2)
    prototype = -np.exp(1j * np.pi * m / (2 * order))           # analogue poles, no zeros, gain 1
    warped = 4.0 * np.tan(np.pi * (2.0 * np.array([low_hz, high_hz]) / rate_hz) / 2.0)
    bw = warped[1] - warped[0]
    wo = np.sqrt(warped[0] * warped[1])
    p_lp = (prototype * bw / 2).astype(complex)
    p_bp = np.concatenate((p_lp + np.sqrt(p_lp ** 2 - wo ** 2), p_lp - np.sqrt(p_lp ** 2 - wo ** 2)))
    z_bp = np.zeros(order)                                        # the zeros moved to the origin
    k_bp = bw ** order
    fs2 = 4.0                                                     # bilinear transform at fs = 2
    z = np.append((fs2 + z_bp) / (fs2 - z_bp), -np.ones(order))
    p = (fs2 + p_bp) / (fs2 - p_bp)
    k = k_bp * np.real(np.prod(fs2 - z_bp) / np.prod(fs2 - p_bp))
    return _pair_sections(z, p, k)


def _pair_sections(z: np.ndarray, p: np.ndarray, k: float) -> np.ndarray:
    """Pair zeros and poles into sections ("nearest" pairing, the worst poles last)."""
    n_sections = (len(p) + 1) // 2
    if len(p) % 2:
        p, z = np.append(p, 0.0), np.append(z, 0.0)
    z = np.concatenate(_conjugate_halves(z))
    p = np.concatenate(_conjugate_halves(p))
    sos = np.zeros((n_sections, 6))
    for si in range(n_sections - 1, -1, -1):
        i = _worst(p)
        p1, p = p[i], np.delete(p, i)
        if np.isreal(p1) and np.isreal(p).sum() == 0:
            j = _nearest(z, p1, "real")
            sos[si] = _section([z[j], 0], [p1, 0])
            z = np.delete(z, j)
        elif len(p) + 1 == len(z) and not np.isreal(p1) and np.isreal(p).sum() == 1 and np.isreal(z).sum() == 1:
            j = _nearest(z, p1, "complex")
            sos[si] = _section([z[j], z[j].conj()], [p1, p1.conj()])
            z = np.delete(z, j)
        else:
            if np.isreal(p1):
                reals = np.flatnonzero(np.isreal(p))
                i2 = reals[_worst(p[reals])]
                p2, p = p[i2], np.delete(p, i2)
            else:
                p2 = p1.conj()
            j = _nearest(z, p1, "any")
            z1, z = z[j], np.delete(z, j)
            if not np.isreal(z1):
                sos[si] = _section([z1, z1.conj()], [p1, p2])
            else:
                j2 = _nearest(z, p1, "real")
                sos[si] = _section([z1, z[j2]], [p1, p2])
                z = np.delete(z, j2)
    sos[0, :3] *= k
    return sos


def _worst(p: np.ndarray) -> int:
    """The pole nearest the unit circle."""
    return int(np.argmin(np.abs(1 - np.abs(p))))


def _nearest(fro: np.ndarray, to: complex, which: str) -> int:
    """Index in ``fro`` of the root nearest ``to`` among all, the real or the complex ones."""
    order = np.argsort(np.abs(fro - to))
    if which == "any":
        return int(order[0])
    real = np.isreal(fro[order])
    return int(order[np.flatnonzero(real if which == "real" else ~real)[0]])


def _section(zeros: list, poles: list) -> np.ndarray:
    """One section from two zeros and two poles (a conjugate pair or two real roots), unit gain."""
    b = np.poly(zeros)
    a = np.poly(poles)
    return np.concatenate((np.real(b), np.real(a)))


def _conjugate_halves(z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Split roots into one of each conjugate pair (upper half plane, averaged with its twin) and the
    real ones, sorted by real part then imaginary magnitude."""
    z = np.atleast_1d(np.asarray(z, dtype=complex))
    tol = 100 * np.finfo(float).eps
    z = z[np.lexsort((abs(z.imag), z.real))]
    is_real = abs(z.imag) <= tol * abs(z)
    zr = z[is_real].real
    if is_real.all():
        return np.array([]), zr
    z = z[~is_real]
    zp, zn = z[z.imag > 0], z[z.imag < 0]
    if len(zp) != len(zn):
        raise ValueError("complex roots must come in conjugate pairs")
    same = np.diff(zp.real) <= tol * abs(zp[:-1])
    edges = np.diff(np.concatenate(([0], same.astype(int), [0])))
    for start, stop in zip(np.flatnonzero(edges > 0), np.flatnonzero(edges < 0) + 1):
        for run in (zp[start:stop], zn[start:stop]):
            run[...] = run[np.lexsort([abs(run.imag)])]
    return (zp + zn.conj()) / 2, zr
