"""Voltages of a synthetic scenario, chunk by chunk: background noise, hum, drift, spikes, artefacts.

Everything is deterministic from the scenario's seed, so files of any length stream to disk and
the same settings give the same samples. Invented data, for practice and ground-truth tests.
"""

from __future__ import annotations

from typing import Iterator

import numpy as np

from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.synthetic.scenario import Scenario

TEMPLATE_MS = (-1.0, 2.0)
PINK_SHARE = 14.0 / 11.0     # SD of the low-frequency part per uV of white noise (coloured noise)
SHARED_SHARE = 3.0 / 11.0    # SD of the noise shared by a bundle per uV of white noise (coloured noise)
PINK_CORNER_HZ = 800.0
HUM_HZ = 50.0
HUM_LOW_SHARE = 0.375        # each channel's hum lies between 3/8 and all of the largest
DRIFT_HZ = 0.3
DRIFT_LOW_SHARE = 1.0 / 3.0


def pink_filter(rate_hz: float) -> np.ndarray:
    """The first-order low-pass that colours the low-frequency part of the background."""
    from scipy import signal  # here: scipy.signal costs seconds of every window's start-up

    return signal.butter(1, PINK_CORNER_HZ, "lowpass", fs=rate_hz, output="sos")


class Background:
    """White noise (with, when coloured, a low-frequency part and noise shared by a bundle),
    mains hum and slow drift, streamed chunk by chunk."""

    def __init__(self, sc: Scenario):
        self.sc = sc
        s = sc.settings
        self.rng = np.random.default_rng(sc.seed + 1)
        self.coloured = s.noise_colour == "coloured"
        self.sos_pink = pink_filter(sc.rate_hz)
        self.zi = np.zeros((self.sos_pink.shape[0], 2, sc.n_channels))
        self.white_sd = np.float32(s.noise_uv)
        self.pink_sd = np.float32(PINK_SHARE * s.noise_uv)
        self.shared_sd = np.float32(SHARED_SHARE * s.noise_uv)
        self.hum_amp = self.rng.uniform(HUM_LOW_SHARE * s.hum_uv, s.hum_uv, sc.n_channels)
        self.drift_amp = self.rng.uniform(DRIFT_LOW_SHARE * s.drift_uv, s.drift_uv, sc.n_channels)
        self.drift_phase = self.rng.uniform(0, 2 * np.pi, sc.n_channels)

    def chunk(self, start: int, stop: int) -> np.ndarray:
        n, c = stop - start, self.sc.n_channels
        x = self.rng.standard_normal((n, c), dtype=np.float32) * self.white_sd
        if self.coloured:
            slow = self.rng.standard_normal((n, c), dtype=np.float32) * self.pink_sd
            from scipy import signal

            pink, self.zi = signal.sosfilt(self.sos_pink, slow, axis=0, zi=self.zi)
            shared = self.rng.standard_normal((n, len(self.sc.groups)), dtype=np.float32) * self.shared_sd
            x = x + pink.astype(np.float32)
            for gi, g in enumerate(self.sc.groups):
                x[:, g] += shared[:, gi:gi + 1]
        t = (np.arange(start, stop) / self.sc.rate_hz)[:, None]
        x += (self.hum_amp * np.sin(2 * np.pi * HUM_HZ * t) + 0.2 * self.hum_amp * np.sin(2 * np.pi * 3 * HUM_HZ * t)
              + self.drift_amp * np.sin(2 * np.pi * DRIFT_HZ * t + self.drift_phase)).astype(np.float32)
        return x


def _add_events(x: np.ndarray, start: int, sc: Scenario) -> None:
    n = len(x)
    pre = -int(TEMPLATE_MS[0] * sc.rate_hz / 1000)
    tlen = len(sc.units[0].template) if sc.units else 0
    lo = np.searchsorted(sc.spike_sample, start - tlen)
    hi = np.searchsorted(sc.spike_sample, start + n + tlen)
    for s, u, a in zip(sc.spike_sample[lo:hi], sc.spike_unit[lo:hi], sc.spike_scale[lo:hi]):
        unit = sc.units[u]
        w = np.outer(unit.template * a, unit.footprint).astype(np.float32)
        i0 = s - pre - start
        a0, a1 = max(0, i0), min(n, i0 + tlen)
        if a1 > a0:
            x[a0:a1, unit.channels] += w[a0 - i0:a1 - i0]
    add_artefacts(x, start, sc)


def add_artefacts(x: np.ndarray, start: int, sc) -> None:
    """Add the scenario's movement artefacts (a damped 300 Hz pulse on every channel, gains drawn
    from ``sc.seed``) to the chunk ``x`` starting at sample ``start``."""
    n = len(x)
    alen = int(0.004 * sc.rate_hz)
    ta = np.arange(alen) / sc.rate_hz
    pulse = (np.sin(2 * np.pi * 300 * ta) * np.exp(-ta / 0.0015)).astype(np.float32)
    rng = np.random.default_rng(sc.seed + 7)
    gains = rng.uniform(600, 1200, (len(sc.artefact_sample), sc.n_channels)).astype(np.float32)
    for k, s in enumerate(sc.artefact_sample):
        i0 = s - start
        a0, a1 = max(0, i0), min(n, i0 + alen)
        if a1 > a0:
            x[a0:a1] += pulse[a0 - i0:a1 - i0, None] * gains[k]


def render(sc: Scenario, chunk_s: float = 2.0, progress: ProgressFn = None,
           cancel: CancelFn = None) -> Iterator[tuple[int, np.ndarray]]:
    """Yield ``(start, microvolts float32 chunk)`` covering the scenario in order."""
    bg = Background(sc)
    chunk = max(1, int(chunk_s * sc.rate_hz))
    for start in range(0, sc.n_samples, chunk):
        check(cancel)
        stop = min(start + chunk, sc.n_samples)
        x = bg.chunk(start, stop)
        _add_events(x, start, sc)
        report(progress, stop / sc.n_samples, "synthesising")
        yield start, x


def band_noise_sigma(settings, sos: np.ndarray) -> float:
    """Expected SD (uV) of the background noise after the zero-phase band-pass ``sos``.

    Each part's variance times the mean over 0..Nyquist of its power response through the
    low-pass (coloured part, single pass) and the band-pass (forward-backward: ``|H|^4``).
    Hum and drift lie far below the band and are left out.
    """
    rate = settings.rate_hz
    from scipy import signal

    f, h = signal.sosfreqz(sos, worN=1 << 15, fs=rate)
    band = np.abs(h) ** 4
    var = settings.noise_uv ** 2 * float(np.mean(band))
    if settings.noise_colour == "coloured":
        _, lp = signal.sosfreqz(pink_filter(rate), worN=f, fs=rate)
        var += (PINK_SHARE * settings.noise_uv) ** 2 * float(np.mean(np.abs(lp) ** 2 * band))
        var += (SHARED_SHARE * settings.noise_uv) ** 2 * float(np.mean(band))
    return float(np.sqrt(var))
