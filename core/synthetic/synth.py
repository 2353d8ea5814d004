"""Synthetic recordings with known ground truth (the demo scenario).

A hypothetical rodent cortex recording: 4-wire bundles, three units per bundle with
distinct triphasic waveforms, rates 1-40 Hz, one bursting unit, one unit whose amplitude
decays slowly, two look-alike units on one bundle, occasional movement artefacts on all
channels, mains hum and slow drift (removed by the band-pass) and coloured background
noise. Everything is deterministic from the seed and generated chunk by chunk, so files
of any length stream to disk. Invented data, for the demo and ground-truth tests only.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import signal

from rigside.core.errors import ParamError
from rigside.core.io.atomic import atomic_write
from rigside.core.io.recording import META_SUFFIX, TRUTH_SUFFIXES, Layout, groups_of_size, write_metadata
from rigside.core.progress import CancelFn, ProgressFn, check, report

GAIN_UV = 0.195  # microvolts per bit of the int16 file (a common amplifier step)
RATES_HZ = (1.0, 2.0, 3.0, 5.0, 8.0, 10.0, 12.0, 15.0, 20.0, 25.0, 30.0, 40.0)
TEMPLATE_MS = (-1.0, 2.0)
REFRACTORY_S = 0.002


@dataclass
class Unit:
    """One synthetic neuron."""

    unit: int
    group: int
    channels: np.ndarray      # the group's channels
    footprint: np.ndarray     # gain per channel of the group
    template: np.ndarray      # waveform in uV on the main channel (peak -amplitude)
    rate_hz: float
    kind: str                 # regular, bursting, drifting, look-alike
    amplitude_uv: float


@dataclass
class Scenario:
    """Units, spike times and the recording layout of one synthetic recording."""

    rate_hz: float
    n_samples: int
    n_channels: int
    groups: list[list[int]]
    units: list[Unit]
    spike_sample: np.ndarray   # trough sample of every spike (sorted)
    spike_unit: np.ndarray
    spike_scale: np.ndarray    # amplitude multiplier of every spike
    artefact_sample: np.ndarray
    seed: int


def triphasic(t_ms: np.ndarray, pre: float, post: float, post_delay: float, width: float) -> np.ndarray:
    """A triphasic extracellular waveform with its trough (-1) at t = 0 ms."""
    w = (pre * np.exp(-((t_ms + 0.28) ** 2) / (2 * 0.1 ** 2))
         - np.exp(-(t_ms ** 2) / (2 * width ** 2))
         + post * np.exp(-((t_ms - post_delay) ** 2) / (2 * (1.6 * width + 0.12) ** 2)))
    return w / -w[np.argmin(np.abs(t_ms))]


def spike_train(rng: np.random.Generator, rate: float, duration: float, kind: str):
    """Spike times (s) and amplitude scales for one unit: Poisson with a refractory period,
    or bursts of 2-5 spikes 3-5 ms apart with decreasing amplitude."""
    if kind == "bursting":
        n_bursts = rng.poisson(rate / 3.5 * duration)
        starts = np.sort(rng.uniform(0, duration, n_bursts))
        times, scales = [], []
        for s in starts:
            k = rng.integers(2, 6)
            isi = rng.uniform(0.003, 0.005, k - 1)
            times.extend(s + np.concatenate([[0], np.cumsum(isi)]))
            scales.extend(0.85 ** np.arange(k))
        t, sc = np.asarray(times), np.asarray(scales)
        inside = t < duration  # a burst starting near the end must not run past it
        t, sc = t[inside], sc[inside]
    else:
        n = rng.poisson(rate * duration * 1.2) + 10
        isi = REFRACTORY_S + rng.exponential(max(1 / rate - REFRACTORY_S, 1e-4), n)
        t = rng.uniform(0, 1 / rate) + np.cumsum(isi)
        t = t[t < duration]
        sc = np.ones(len(t))
    order = np.argsort(t)
    t, sc = t[order], sc[order]
    keep = np.concatenate([[True], np.diff(t) >= REFRACTORY_S]) if len(t) else np.ones(0, bool)
    return t[keep], sc[keep]


def make_scenario(seconds: float = 60.0, channels: int = 16, seed: int = 0,
                  rate_hz: float = 30000.0) -> Scenario:
    """Build the demo scenario: units, footprints and every spike time.

    Parameters
    ----------
    seconds, channels, seed, rate_hz
        Length, channel count (grouped in 4-wire bundles), random seed, sampling rate.

    Returns
    -------
    Scenario
        The complete ground truth; :func:`render` turns it into voltages.
    """
    if not seconds > 0 or not channels >= 1:
        raise ValueError(f"synthetic recording must have seconds > 0 and channels >= 1, got {seconds}, {channels}")
    rng = np.random.default_rng(seed)
    groups = groups_of_size(channels, 4)
    n_samples = int(round(seconds * rate_hz))
    t_ms = np.arange(int(TEMPLATE_MS[0] * rate_hz / 1000), int(TEMPLATE_MS[1] * rate_hz / 1000)) * 1000 / rate_hz
    units: list[Unit] = []
    kinds_cycle = ["regular"] * 12
    kinds_cycle[2], kinds_cycle[7] = "bursting", "drifting"
    kinds_cycle[4], kinds_cycle[5] = "look-alike", "look-alike"
    rates = rng.permutation(RATES_HZ)
    for gi, g in enumerate(groups):
        for k in range(3):
            uid = len(units)
            kind = kinds_cycle[uid % 12]
            rate = float(rates[uid % 12])
            if kind == "look-alike" and units and units[-1].kind == "look-alike":
                twin = units[-1]
                template = triphasic(t_ms, 0.2, 0.36, 0.52, 0.15) * twin.amplitude_uv * 0.88
                fp = twin.footprint.copy()
                if len(fp) > 1:
                    fp[1:] = np.clip(fp[1:] * rng.uniform(0.8, 1.2, len(fp) - 1), 0.05, 0.95)
                units.append(Unit(uid, gi, np.asarray(g), fp, template, rate, kind, twin.amplitude_uv * 0.88))
                continue
            amp = float(rng.uniform(50, 170)) if kind != "look-alike" else 100.0
            shape = (rng.uniform(0.1, 0.3), rng.uniform(0.25, 0.5), rng.uniform(0.35, 0.7), rng.uniform(0.1, 0.2))
            if kind == "look-alike":
                shape = (0.2, 0.36, 0.52, 0.15)
            template = triphasic(t_ms, *shape) * amp
            fp = rng.uniform(0.1, 0.7, len(g))
            fp[(k * 2 + gi) % len(g)] = 1.0
            units.append(Unit(uid, gi, np.asarray(g), fp, template, rate, kind, amp))
    times, labels, scales = [], [], []
    for u in units:
        t, sc = spike_train(rng, u.rate_hz, seconds, u.kind)
        if u.kind == "drifting":
            sc = sc * (1.0 - 0.4 * t / seconds)
        times.append(t)
        labels.append(np.full(len(t), u.unit))
        scales.append(sc * rng.normal(1.0, 0.04, len(t)))
    t = np.concatenate(times)
    order = np.argsort(t, kind="stable")
    samples = np.round(t[order] * rate_hz).astype(np.int64)
    n_art = rng.poisson(seconds / 12.0)
    artefacts = np.sort(rng.integers(int(0.01 * n_samples), max(int(0.99 * n_samples), 1), n_art))
    return Scenario(rate_hz, n_samples, channels, groups, units, samples,
                    np.concatenate(labels)[order].astype(np.int32),
                    np.concatenate(scales)[order], artefacts.astype(np.int64), seed)


class Background:
    """Coloured noise, shared bundle noise, mains hum and slow drift, streamed chunk by chunk."""

    def __init__(self, sc: Scenario):
        self.sc = sc
        self.rng = np.random.default_rng(sc.seed + 1)
        self.sos_pink = signal.butter(1, 800, "lowpass", fs=sc.rate_hz, output="sos")
        self.zi = np.zeros((self.sos_pink.shape[0], 2, sc.n_channels))
        self.hum_amp = self.rng.uniform(15, 40, sc.n_channels)
        self.drift_amp = self.rng.uniform(50, 150, sc.n_channels)
        self.drift_phase = self.rng.uniform(0, 2 * np.pi, sc.n_channels)

    def chunk(self, start: int, stop: int) -> np.ndarray:
        n, c = stop - start, self.sc.n_channels
        white = self.rng.standard_normal((n, c), dtype=np.float32) * np.float32(11.0)
        slow = self.rng.standard_normal((n, c), dtype=np.float32) * np.float32(14.0)
        pink, self.zi = signal.sosfilt(self.sos_pink, slow, axis=0, zi=self.zi)
        shared = self.rng.standard_normal((n, len(self.sc.groups)), dtype=np.float32) * np.float32(3.0)
        x = white + pink.astype(np.float32)
        for gi, g in enumerate(self.sc.groups):
            x[:, g] += shared[:, gi:gi + 1]
        t = (np.arange(start, stop) / self.sc.rate_hz)[:, None]
        x += (self.hum_amp * np.sin(2 * np.pi * 50 * t) + 0.2 * self.hum_amp * np.sin(2 * np.pi * 150 * t)
              + self.drift_amp * np.sin(2 * np.pi * 0.3 * t + self.drift_phase)).astype(np.float32)
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


def render(sc: Scenario, chunk_s: float = 2.0, progress: ProgressFn = None, cancel: CancelFn = None):
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


def write_synth(out: str | Path, seconds: float = 60.0, channels: int = 16, seed: int = 0,
                rate_hz: float = 30000.0, progress: ProgressFn = None, cancel: CancelFn = None,
                overwrite: bool = False) -> Scenario:
    """Write an int16 raw recording, its metadata file and its ground truth.

    Writes ``OUT`` (raw), ``<stem>.rigside.toml``, ``<stem>.truth.csv`` (unit,sample,time_s)
    and ``<stem>.truth_units.csv`` (one row per unit). The raw file is written to a
    temporary name and renamed when complete. Existing files are refused unless ``overwrite``.
    """
    out = refuse_existing(out, overwrite)
    sc = make_scenario(seconds, channels, seed, rate_hz)
    def write(tmp: Path) -> None:
        with open(tmp, "wb") as fh:
            for _, x in render(sc, progress=progress, cancel=cancel):
                np.clip(np.round(x / GAIN_UV), -32768, 32767).astype("<i2").tofile(fh)
    atomic_write(out, write)
    write_metadata(out, Layout(channels=channels, rate_hz=float(rate_hz), dtype="int16", gain_uv=GAIN_UV,
                               groups=sc.groups, group_names=[f"bundle {chr(65 + i)}" if i < 26 else f"bundle {i + 1}"
                                                              for i in range(len(sc.groups))]))
    write_truth(out, sc)
    return sc


def refuse_existing(out: str | Path, overwrite: bool) -> Path:
    """``out`` as a path, after refusing existing output files unless ``overwrite``."""
    out = Path(out)
    existing = [str(f) for f in (out, *synth_side_files(out)) if f.exists() or f.is_symlink()]
    if existing and not overwrite:
        raise ParamError(f"synthetic recording files must not exist yet (give --overwrite to replace them), "
                         f"got {', '.join(existing)}")
    return out


def synth_side_files(out: Path) -> list[Path]:
    """The metadata and ground-truth files written beside a synthetic recording ``out``."""
    return [out.with_name(out.stem + META_SUFFIX)] + [out.with_name(out.stem + s) for s in TRUTH_SUFFIXES]


def write_truth(out: Path, sc: Scenario) -> None:
    """Ground-truth CSV files beside the recording (each written atomically)."""
    def spikes(tmp: Path) -> None:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["unit", "sample", "time_s"])
            for s, u in zip(sc.spike_sample, sc.spike_unit):
                w.writerow([int(u), int(s), f"{s / sc.rate_hz:.6f}"])

    def units(tmp: Path) -> None:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["unit", "group", "peak_channel", "peak_uv", "rate_hz", "kind"])
            for u in sc.units:
                w.writerow([u.unit, u.group, int(u.channels[np.argmax(u.footprint)]), f"{u.amplitude_uv:.1f}",
                            f"{u.rate_hz:g}", u.kind])
    atomic_write(out.with_name(out.stem + TRUTH_SUFFIXES[0]), spikes)
    atomic_write(out.with_name(out.stem + TRUTH_SUFFIXES[1]), units)
