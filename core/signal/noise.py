"""Robust noise per channel from windows sampled across the whole recording.

sigma = median(|x|) / 0.6745 on the band-passed signal (Quian Quiroga, Nadasdy &
Ben-Shaul 2004); the constant is the normal quantile Phi^-1(0.75).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numba
import numpy as np

from rigside.core.io.recording import Recording
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn, report, run_bounded
from rigside.core.signal.filtering import BandPass

NORMAL_MAD = 0.6744897501960817  # Phi^-1(0.75)
EXCLUDED_FLAGS = ("dead", "saturated")
"""Flags whose channels take no part in detection, features or clustering ("noisy" ones do)."""


def robust_sigma(x: np.ndarray, axis: int = 0) -> np.ndarray:
    """median(|x|) / Phi^-1(0.75) along ``axis`` (Quian Quiroga et al. 2004)."""
    return fast_median(np.abs(x), axis=axis) / NORMAL_MAD


def fast_median(a: np.ndarray, axis: int = 0, overwrite_input: bool = False) -> np.ndarray:
    """The median along ``axis`` (as ``np.median``) from a single-element partition, which
    is several times faster than ``np.median``'s two-element one for even lengths.
    ``overwrite_input`` partitions ``a`` in place (its values are reordered along ``axis``)
    instead of partitioning a copy."""
    a = np.moveaxis(np.asarray(a), axis, -1)
    n = a.shape[-1]
    k = n // 2
    if overwrite_input:
        a.partition(k, axis=-1)
        part = a
    else:
        part = np.partition(a, k, axis=-1)
    upper = part[..., k].astype(np.float64)
    if n % 2:
        return upper
    return 0.5 * (upper + part[..., :k].max(axis=-1))


@dataclass
class NoiseEstimate:
    """Noise per channel and the windows it came from.

    Attributes
    ----------
    sigma_uv
        Robust sigma per channel over all windows (microvolts).
    window_start_s, window_sigma_uv
        Start time of each sampled window and the sigma of each channel in it, for
        tracking noise over time in non-stationary recordings.
    bad
        Channel -> reason ("dead", "saturated", "noisy") for channels flagged bad.
    """

    sigma_uv: np.ndarray
    window_start_s: np.ndarray
    window_sigma_uv: np.ndarray
    bad: dict[int, str] = field(default_factory=dict)

    @property
    def excluded(self) -> dict[int, str]:
        """Channel -> reason for the flagged channels left out of detection (dead, saturated)."""
        return {c: r for c, r in self.bad.items() if r in EXCLUDED_FLAGS}


def window_starts(n_samples: int, window: int, n_windows: int, seed: int) -> np.ndarray:
    """Start samples of windows spread over the whole file: one random start per stratum."""
    window = min(window, n_samples)
    n = max(1, min(n_windows, n_samples // window))
    edges = np.linspace(0, n_samples - window, n + 1)
    rng = np.random.default_rng(seed)
    return np.unique(np.floor(edges[:-1] + rng.random(n) * (edges[1:] - edges[:-1])).astype(np.int64))


def estimate_noise(recording: Recording, params: Params, progress: ProgressFn = None,
                   cancel: CancelFn = None, bandpass: BandPass | None = None) -> NoiseEstimate:
    """Estimate each channel's robust noise sigma from windows sampled across the file.

    Parameters
    ----------
    recording
        The recording to measure.
    params
        ``params.noise`` sets the windows, ``params.filter`` the band-pass.
    progress, cancel
        Progress callback and cancel check (see :mod:`rigside.core.progress`).
    bandpass
        A band-pass already bound to ``recording`` (made if not given).

    Returns
    -------
    NoiseEstimate
        Per-channel sigma in microvolts, per-window sigmas, and bad-channel flags.
    """
    params.noise.validate()
    params.check_memory(recording.rate_hz, recording.n_channels)
    bp = bandpass or BandPass(recording, params.filter)
    w = max(2, int(round(params.noise.window_s * recording.rate_hz)))
    starts = window_starts(recording.n_samples, w, params.noise.n_windows, params.noise.seed)
    w = min(w, recording.n_samples)
    # channel-major: fast medians. Both medians partition in place (a copy of the pool is as large as the
    # pool, 460 MB at 384 channels): reordering values within a window's span of a row leaves the row's median
    pooled = np.empty((recording.n_channels, len(starts) * w), dtype=np.float32)
    per_window = np.empty((len(starts), recording.n_channels))
    clipped = np.zeros(recording.n_channels)

    def measure(i: int, s: int) -> tuple[int, np.ndarray, np.ndarray]:
        stored = recording.read_stored(s, s + w)
        y = pooled[:, i * w:(i + 1) * w]
        _abs_transposed(bp.read(s, s + w), y)
        return i, _clip_fraction(stored), fast_median(y, axis=1, overwrite_input=True) / NORMAL_MAD

    def collect(found: tuple[int, np.ndarray, np.ndarray]) -> None:
        nonlocal clipped
        i, clip, window_sigma = found
        clipped += clip
        per_window[i] = window_sigma
        report(progress, (i + 1) / len(starts), "measuring noise")

    run_bounded(measure, ((i, int(s)) for i, s in enumerate(starts)), params.run.workers, collect, cancel)
    sigma = np.empty(recording.n_channels)
    halves = np.array_split(np.arange(recording.n_channels), max(1, params.run.workers))

    def pooled_sigma(rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return rows, fast_median(pooled[rows[0]:rows[-1] + 1], axis=1, overwrite_input=True) / NORMAL_MAD

    run_bounded(pooled_sigma, ((h,) for h in halves if len(h)), params.run.workers,
                lambda found: sigma.__setitem__(found[0], found[1]), cancel)
    return NoiseEstimate(sigma_uv=sigma, window_start_s=starts / recording.rate_hz,
                         window_sigma_uv=per_window, bad=flag_bad(sigma, clipped / len(starts)))


@numba.njit(nogil=True, cache=True)
def _abs_transposed(y, out):
    """``out[c, t] = |y[t, c]|`` in tiles of 64 samples (a transposing copy that stays in cache)."""
    n, nc = y.shape
    for t0 in range(0, n, 64):
        t1 = min(t0 + 64, n)
        for c in range(nc):
            for t in range(t0, t1):
                out[c, t] = abs(y[t, c])


def _clip_fraction(raw: np.ndarray) -> np.ndarray:
    """Fraction of samples sitting at the channel's extreme value (a rail), per channel; the stored
    values serve as well as microvolts (the scale is linear, distinct values stay distinct)."""
    hi, lo = raw.max(axis=0), raw.min(axis=0)
    at_rail = np.maximum((raw == hi).sum(axis=0), (raw == lo).sum(axis=0)) / len(raw)
    return np.where(hi > lo, at_rail, 0.0)


def flag_bad(sigma_uv: np.ndarray, rail_fraction: np.ndarray, noisy_factor: float = 5.0,
             dead_factor: float = 0.1, rail_limit: float = 0.01) -> dict[int, str]:
    """Flag channels: dead (sigma zero or far below the median), saturated (often at a
    rail), noisy (sigma far above the median). Factors are common practice, no source."""
    med = float(np.median(sigma_uv)) if len(sigma_uv) else 0.0
    bad: dict[int, str] = {}
    for c, s in enumerate(sigma_uv):
        if s <= 0 or (med > 0 and s < dead_factor * med):
            bad[c] = "dead"
        elif rail_fraction[c] > rail_limit:
            bad[c] = "saturated"
        elif med > 0 and s > noisy_factor * med:
            bad[c] = "noisy"
    return bad


def groups_without_usable_channel(groups: list[np.ndarray], excluded: dict[int, str]) -> list[int]:
    """Indices of the channel groups whose every channel is excluded (they are skipped)."""
    return [gi for gi, g in enumerate(groups) if all(int(c) in excluded for c in g)]


def exclusion_notes(groups: list[np.ndarray], group_names: list[str], excluded: dict[int, str]) -> list[str]:
    """One sentence per excluded channel kind and per skipped group, for summaries."""
    notes = []
    for reason in EXCLUDED_FLAGS:
        chans = sorted(c for c, r in excluded.items() if r == reason)
        if chans:
            notes.append(f"{reason} channel(s) {', '.join(map(str, chans))} left out of detection and sorting")
    for gi in groups_without_usable_channel(groups, excluded):
        notes.append(f"{group_names[gi]} skipped: no usable channel")
    return notes
