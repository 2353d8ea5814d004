"""Synthetic recordings with known ground truth (the demo scenario and practice recordings).

A hypothetical rodent cortex recording: 4-wire bundles, three units per bundle with
distinct triphasic waveforms, rates 1-40 Hz, one bursting unit, one unit whose amplitude
decays slowly, two look-alike units on one bundle, occasional movement artefacts on all
channels, mains hum and slow drift (removed by the band-pass) and coloured background
noise. A :class:`~rigside.core.synthetic.settings.SynthSettings` varies all of these for
practice; its defaults are the demo. Everything is deterministic from the seed and generated
chunk by chunk (:mod:`rigside.core.synthetic.render`), so files of any length stream to disk.
Invented data, for the demo, practice and ground-truth tests only.
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

from rigside.core.errors import ParamError
from rigside.core.io.atomic import atomic_write
from rigside.core.io.recording import META_SUFFIX, TRUTH_SUFFIXES, Layout, groups_of_size, write_metadata
from rigside.core.params import FilterParams
from rigside.core.progress import CancelFn, ProgressFn
from rigside.core.signal.filtering import design_bandpass
from rigside.core.synthetic.render import TEMPLATE_MS, band_noise_sigma, render
from rigside.core.synthetic.scenario import Scenario, Unit
from rigside.core.synthetic.settings import SynthSettings, settings_path

GAIN_UV = 0.195  # microvolts per bit of the int16 file (a common amplifier step)
LOOK_ALIKE_AT = (5, 12)   # the look-alike pair's amplitude: 5/12 of the way up the range (100 uV in 50-170 uV)
REFRACTORY_S = 0.002


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
    """The demo scenario of a given length, channel count, seed and sampling rate
    (:func:`build_scenario` with the other settings at their defaults)."""
    return build_scenario(SynthSettings(seconds=float(seconds), channels=int(channels), seed=int(seed),
                                        rate_hz=float(rate_hz)))


def amplitude_range(settings: SynthSettings) -> tuple[float, float]:
    """Raw peak amplitudes (uV) units are drawn from: ``amplitude_uv``, or ``snr`` times the
    expected band noise sigma (default 300-6000 Hz band-pass)."""
    if settings.snr is None:
        return settings.amplitude_uv
    sigma = band_noise_sigma(settings, design_bandpass(FilterParams(), settings.rate_hz))
    return settings.snr[0] * sigma, settings.snr[1] * sigma


def build_scenario(settings: SynthSettings) -> Scenario:
    """Build a scenario from its settings: units, footprints and every spike time.

    Parameters
    ----------
    settings
        Length, channels and bundles, units, amplitudes, rates, noise, artefacts, overlaps, seed.

    Returns
    -------
    Scenario
        The complete ground truth; :func:`rigside.core.synthetic.render.render` turns it into voltages.
    """
    s = settings.validate()
    rng = np.random.default_rng(s.seed)
    groups = groups_of_size(s.channels, s.group_size)
    n_samples = s.n_samples()
    rates = rng.permutation(np.asarray(s.rates()))
    units = _make_units(rng, s, groups, rates)
    times, labels, scales = [], [], []
    for u in units:
        t, sc = spike_train(rng, u.rate_hz, s.seconds, u.kind)
        if u.kind == "drifting":
            sc = sc * (1.0 - 0.4 * t / s.seconds)
        times.append(t)
        labels.append(np.full(len(t), u.unit))
        scales.append(sc * rng.normal(1.0, 0.04, len(t)))
    if s.overlap_fraction > 0:
        _add_overlaps(np.random.default_rng(s.seed + 11), s, units, times, labels, scales)
    t = np.concatenate([np.zeros(0)] + times)
    order = np.argsort(t, kind="stable")
    samples = np.round(t[order] * s.rate_hz).astype(np.int64)
    n_art = rng.poisson(s.seconds / (60.0 / s.artefacts_per_min)) if s.artefacts_per_min > 0 else 0
    artefacts = np.sort(rng.integers(int(0.01 * n_samples), max(int(0.99 * n_samples), 1), n_art))
    return Scenario(s.rate_hz, n_samples, s.channels, groups, units, samples,
                    np.concatenate([np.zeros(0, np.int32)] + labels)[order].astype(np.int32),
                    np.concatenate([np.zeros(0)] + scales)[order], artefacts.astype(np.int64), s.seed, s)


def _make_units(rng: np.random.Generator, s: SynthSettings, groups: list[list[int]],
                rates: np.ndarray) -> list[Unit]:
    """The units bundle by bundle (spread evenly), their kinds cycling through the demo's twelve."""
    t_ms = np.arange(int(TEMPLATE_MS[0] * s.rate_hz / 1000), int(TEMPLATE_MS[1] * s.rate_hz / 1000)) * 1000 / s.rate_hz
    lo, hi = amplitude_range(s)
    n, n_groups = s.n_units(), len(groups)
    kinds_cycle = ["regular"] * 12
    kinds_cycle[2], kinds_cycle[7] = "bursting", "drifting"
    kinds_cycle[4], kinds_cycle[5] = "look-alike", "look-alike"
    units: list[Unit] = []
    for gi, g in enumerate(groups):
        for k in range(n // n_groups + (gi < n % n_groups)):
            uid = len(units)
            kind = kinds_cycle[uid % 12]
            rate = float(rates[uid % 12])
            twin = units[-1] if units and units[-1].kind == "look-alike" and units[-1].group == gi else None
            if kind == "look-alike" and twin is not None:
                template = triphasic(t_ms, 0.2, 0.36, 0.52, 0.15) * twin.amplitude_uv * 0.88
                fp = twin.footprint.copy()
                if len(fp) > 1:
                    fp[1:] = np.clip(fp[1:] * rng.uniform(0.8, 1.2, len(fp) - 1), 0.05, 0.95)
                units.append(Unit(uid, gi, np.asarray(g), fp, template, rate, kind, twin.amplitude_uv * 0.88))
                continue
            amp = (float(rng.uniform(lo, hi)) if kind != "look-alike"
                   else lo + (hi - lo) * LOOK_ALIKE_AT[0] / LOOK_ALIKE_AT[1])
            shape = (rng.uniform(0.1, 0.3), rng.uniform(0.25, 0.5), rng.uniform(0.35, 0.7), rng.uniform(0.1, 0.2))
            if kind == "look-alike":
                shape = (0.2, 0.36, 0.52, 0.15)
            template = triphasic(t_ms, *shape) * amp
            fp = rng.uniform(0.1, 0.7, len(g))
            fp[(k * 2 + gi) % len(g)] = 1.0
            units.append(Unit(uid, gi, np.asarray(g), fp, template, rate, kind, amp))
    return units


def _add_overlaps(rng: np.random.Generator, s: SynthSettings, units: list[Unit], times: list, labels: list,
                  scales: list) -> None:
    """Give ``fraction`` of each unit's spikes a spike of another unit of its bundle 0.2-1 ms later
    (the partner's train keeps its refractory period)."""
    extra: dict[int, list[np.ndarray]] = {u.unit: [] for u in units}
    for u in units:
        partners = [v.unit for v in units if v.group == u.group and v.unit != u.unit]
        if not partners or not len(times[u.unit]):
            continue
        chosen = times[u.unit][rng.random(len(times[u.unit])) < s.overlap_fraction]
        who = rng.choice(partners, len(chosen))
        lag = rng.uniform(0.0002, 0.001, len(chosen))
        for p in partners:
            extra[p].append(chosen[who == p] + lag[who == p])
    for u in units:
        if not extra[u.unit]:
            continue
        add = np.concatenate(extra[u.unit])
        add = add[add < s.seconds]
        t = np.concatenate([times[u.unit], add])
        sc = np.concatenate([scales[u.unit], rng.normal(1.0, 0.04, len(add))])
        order = np.argsort(t, kind="stable")
        t, sc = t[order], sc[order]
        keep = np.concatenate([[True], np.diff(t) >= REFRACTORY_S]) if len(t) else np.ones(0, bool)
        times[u.unit], scales[u.unit] = t[keep], sc[keep]
        labels[u.unit] = np.full(int(keep.sum()), u.unit)


def write_synth(out: str | Path, seconds: float = 60.0, channels: int = 16, seed: int = 0,
                rate_hz: float = 30000.0, progress: ProgressFn = None, cancel: CancelFn = None,
                overwrite: bool = False) -> Scenario:
    """The demo scenario of a given size written as a practice recording (:func:`write_practice`)."""
    settings = SynthSettings(seconds=float(seconds), channels=int(channels), seed=int(seed), rate_hz=float(rate_hz))
    return write_practice(out, settings, progress=progress, cancel=cancel, overwrite=overwrite)


def write_practice(out: str | Path, settings: SynthSettings, progress: ProgressFn = None,
                   cancel: CancelFn = None, overwrite: bool = False) -> Scenario:
    """Write an int16 raw recording, its metadata, its ground truth and its settings.

    Parameters
    ----------
    out
        The raw file to write; beside it go ``<stem>.rigside.toml`` (layout), ``<stem>.truth.csv``
        (unit,sample,time_s), ``<stem>.truth_units.csv`` (one row per unit) and ``<stem>.synth.toml``
        (the settings, to make the same recording again).
    settings
        What to synthesise (checked first).
    progress, cancel
        Progress callback and cancel check; a cancelled write leaves no file behind.
    overwrite
        Replace existing files of these names (refused otherwise).

    Returns
    -------
    Scenario
        The ground truth that was written.
    """
    settings.validate()
    out = refuse_existing(out, overwrite)
    sc = build_scenario(settings)

    def write(tmp: Path) -> None:
        with open(tmp, "wb") as fh:
            for _, x in render(sc, progress=progress, cancel=cancel):
                np.clip(np.round(x / GAIN_UV), -32768, 32767).astype("<i2").tofile(fh)
    atomic_write(out, write)
    write_metadata(out, Layout(channels=settings.channels, rate_hz=float(settings.rate_hz), dtype="int16",
                               gain_uv=GAIN_UV, groups=sc.groups,
                               group_names=[f"bundle {chr(65 + i)}" if i < 26 else f"bundle {i + 1}"
                                            for i in range(len(sc.groups))]))
    write_truth(out, sc)
    settings.save(settings_path(out))
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
    return ([out.with_name(out.stem + META_SUFFIX)] + [out.with_name(out.stem + s) for s in TRUTH_SUFFIXES]
            + [settings_path(out)])


def write_truth_spikes(out: Path, sc) -> None:
    """The ground-truth spike file ``<stem>.truth.csv`` (``unit,sample,time_s``) of any scenario
    with ``spike_sample``, ``spike_unit`` and ``rate_hz``, written atomically."""
    def spikes(tmp: Path) -> None:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["unit", "sample", "time_s"])
            for s, u in zip(sc.spike_sample, sc.spike_unit):
                w.writerow([int(u), int(s), f"{s / sc.rate_hz:.6f}"])
    atomic_write(out.with_name(out.stem + TRUTH_SUFFIXES[0]), spikes)


def write_truth(out: Path, sc: Scenario) -> None:
    """Ground-truth CSV files beside the recording (each written atomically)."""
    def units(tmp: Path) -> None:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["unit", "group", "peak_channel", "peak_uv", "rate_hz", "kind"])
            for u in sc.units:
                w.writerow([u.unit, u.group, int(u.channels[np.argmax(u.footprint)]), f"{u.amplitude_uv:.1f}",
                            f"{u.rate_hz:g}", u.kind])
    write_truth_spikes(out, sc)
    atomic_write(out.with_name(out.stem + TRUTH_SUFFIXES[1]), units)
