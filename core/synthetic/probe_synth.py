"""Synthetic probe recordings with known ground truth (invented data, for tests and demos only).

A probe layout of our own: ``columns`` columns of sites ``pitch_um`` apart (across and along), on
one or more shanks 250 um apart. Units sit evenly (with jitter) along the probe; each spike's
amplitude at a site decays with the in-plane distance ``r`` from the unit as ``exp(-r / DECAY_UM)``
(:func:`site_gains`), so one spike reaches several neighbouring sites. The probe drifts slowly along
its length: every unit's ``y_um`` moves linearly by ``drift_um`` over the recording. A share of each
unit's spikes is copied, within 0.3 ms, to the next unit at least 80 um along the shank (overlapping
spikes on sites two neighbourhoods apart). Background noise, hum, slow drift and movement artefacts
on every site come from the bundle scenario (:mod:`rigside.core.synthetic.synth`).

Ground truth beside ``NAME.bin``: ``NAME.truth.csv`` (``unit,sample,time_s``, as for bundles, so
:func:`rigside.core.synthetic.truth.load_truth` reads both) and ``NAME.truth_units.csv`` with the
bundle columns (``group`` is the shank, ``peak_channel`` and ``peak_uv`` the nearest site and its
amplitude at the start) followed by ``shank,x_um,y_um,drift_um,amplitude_uv`` (position at the
start, movement over the recording, amplitude at the unit's own position).
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rigside.core.io.atomic import atomic_write
from rigside.core.io.recording import TRUTH_SUFFIXES, Layout, write_metadata
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.synthetic.render import TEMPLATE_MS, Background, add_artefacts
from rigside.core.synthetic.settings import SynthSettings
from rigside.core.synthetic.synth import GAIN_UV, refuse_existing, spike_train, triphasic, write_truth_spikes

DECAY_UM = 25.0
"""Length constant (um) of the exponential amplitude decay with distance from a unit."""
SHANK_SPACING_UM = 250.0
RATES_HZ = (1.0, 2.0, 3.0, 5.0, 8.0, 10.0, 12.0, 15.0, 20.0, 25.0, 30.0, 40.0)
"""Firing rates given to the probe's units in a seeded random order."""
UNIT_SPACING_UM = 30.0
"""One unit per this length of shank (placed evenly, jittered by up to 30% of the spacing)."""
OVERLAP_SHARE = 0.05
OVERLAP_DISTANCE_UM = 80.0
"""Overlapping copies go to a unit at least this far along the shank (the footprints barely touch)."""
GAIN_FLOOR = 0.01
"""Sites whose gain is below this share of the unit's amplitude get nothing (keeps rendering cheap)."""


@dataclass
class ProbeUnit:
    """One synthetic neuron on a probe."""

    unit: int
    shank: int
    x_um: float
    y_um: float               # position at the start; it moves by the scenario's drift
    template: np.ndarray      # waveform in uV at the unit's own position (trough -amplitude_uv)
    rate_hz: float
    amplitude_uv: float


@dataclass
class ProbeScenario:
    """Layout, units and every spike of one synthetic probe recording."""

    rate_hz: float
    n_samples: int
    positions: np.ndarray     # (sites, 2) x_um, y_um
    shank: np.ndarray
    pitch_um: float
    drift_um: float
    units: list[ProbeUnit]
    spike_sample: np.ndarray
    spike_unit: np.ndarray
    spike_scale: np.ndarray
    artefact_sample: np.ndarray
    seed: int
    settings: SynthSettings = SynthSettings()
    """Background noise, hum and drift levels (the defaults of a practice recording)."""

    @property
    def n_channels(self) -> int:
        return len(self.positions)

    @property
    def groups(self) -> list[list[int]]:
        """The shanks as channel lists (background noise shared per shank)."""
        return [np.flatnonzero(self.shank == k).tolist() for k in np.unique(self.shank)]

    def unit_position(self, unit: int, sample) -> tuple[np.ndarray, np.ndarray]:
        """A unit's ``x_um`` and ``y_um`` at the given samples (the drift is linear in time)."""
        u = self.units[unit]
        frac = np.asarray(sample, dtype=np.float64) / max(self.n_samples, 1)
        return np.full(frac.shape, u.x_um), u.y_um + self.drift_um * frac


def probe_layout(sites: int, columns: int = 2, pitch_um: float = 20.0, shanks: int = 1):
    """Site positions of the synthetic probe: ``(x_um, y_um, shank)`` arrays, channel by channel
    (shank by shank, row by row from the tip, column by column)."""
    if not (shanks >= 1 and columns >= 1 and sites >= 1 and sites % (shanks * columns) == 0):
        raise ValueError(f"probe sites must be a positive multiple of shanks x columns ({shanks} x {columns}), "
                         f"got {sites}")
    if not (np.isfinite(pitch_um) and 1 <= pitch_um <= 1000):
        raise ValueError(f"probe pitch must be between 1 and 1000 um, got {pitch_um!r}")
    i = np.arange(sites // shanks)
    x = np.concatenate([(i % columns) * pitch_um + k * SHANK_SPACING_UM for k in range(shanks)])
    y = np.tile((i // columns) * pitch_um, shanks).astype(np.float64)
    return x.astype(np.float64), y, np.repeat(np.arange(shanks), sites // shanks)


def site_gains(positions: np.ndarray, shank: np.ndarray, unit_shank: int, x_um: float, y_um) -> np.ndarray:
    """Amplitude share at every site of a unit at ``(x_um, y_um)``: ``exp(-r / DECAY_UM)`` on its shank,
    0 elsewhere. ``y_um`` may be an array (one row of gains per value)."""
    y = np.atleast_1d(np.asarray(y_um, dtype=np.float64))[:, None]
    r = np.hypot(positions[None, :, 0] - x_um, positions[None, :, 1] - y)
    return np.where(shank[None, :] == unit_shank, np.exp(-r / DECAY_UM), 0.0)


def make_probe_scenario(seconds: float = 20.0, sites: int = 64, columns: int = 2, pitch_um: float = 20.0,
                        shanks: int = 1, drift_um: float = 0.0, seed: int = 0,
                        rate_hz: float = 30000.0) -> ProbeScenario:
    """Build a probe scenario: layout, units and every spike time (see the module text).

    Parameters
    ----------
    seconds, sites, columns, pitch_um, shanks
        Length; site count (all shanks together), columns per shank, site pitch, shank count.
    drift_um
        Movement of every unit along the probe over the whole recording (um, either sign).
    seed, rate_hz
        Random seed and sampling rate.

    Returns
    -------
    ProbeScenario
        The complete ground truth; :func:`render_probe` turns it into voltages.
    """
    if not seconds > 0 or not np.isfinite(drift_um) or abs(drift_um) > 1000:
        raise ValueError(f"probe scenario must have seconds > 0 and a drift of at most 1000 um, "
                         f"got {seconds!r} s, {drift_um!r} um")
    x, y, shank = probe_layout(sites, columns, pitch_um, shanks)
    rng = np.random.default_rng(seed)
    n_samples = int(round(seconds * rate_hz))
    t_ms = np.arange(int(TEMPLATE_MS[0] * rate_hz / 1000), int(TEMPLATE_MS[1] * rate_hz / 1000)) * 1000 / rate_hz
    length = float(y.max())
    units: list[ProbeUnit] = []
    rates = rng.permutation(RATES_HZ)
    for k in range(shanks):
        count = max(1, int(round((length + pitch_um) / UNIT_SPACING_UM)))
        step = (length + pitch_um) / count
        ys = (np.arange(count) + 0.5 + rng.uniform(-0.3, 0.3, count)) * step - pitch_um / 2
        for uy in ys:
            amp = float(rng.uniform(50, 200))
            shape = (rng.uniform(0.1, 0.3), rng.uniform(0.25, 0.5), rng.uniform(0.35, 0.7), rng.uniform(0.1, 0.2))
            ux = float(rng.uniform(-pitch_um / 2, (columns - 1) * pitch_um + pitch_um / 2)) + k * SHANK_SPACING_UM
            units.append(ProbeUnit(len(units), k, ux, float(uy), triphasic(t_ms, *shape) * amp,
                                   float(rates[len(units) % len(rates)]), amp))
    trains = [spike_train(rng, u.rate_hz, seconds, "regular")[0] for u in units]
    trains = _overlaps(rng, trains, units, seconds)
    t = np.concatenate(trains)
    labels = np.concatenate([np.full(len(tr), i, np.int32) for i, tr in enumerate(trains)])
    order = np.argsort(t, kind="stable")
    n_art = rng.poisson(seconds / 12.0)
    artefacts = np.sort(rng.integers(int(0.01 * n_samples), max(int(0.99 * n_samples), 1), n_art))
    return ProbeScenario(rate_hz, n_samples, np.column_stack([x, y]), shank, float(pitch_um), float(drift_um),
                         units, np.round(t[order] * rate_hz).astype(np.int64), labels[order],
                         rng.normal(1.0, 0.04, len(t)), artefacts.astype(np.int64), seed)


def _overlaps(rng: np.random.Generator, trains: list[np.ndarray], units: list[ProbeUnit],
              seconds: float) -> list[np.ndarray]:
    """Copy a share of each unit's spikes (jittered by up to 0.3 ms) to the next unit along its shank
    at least :data:`OVERLAP_DISTANCE_UM` away, dropping that unit's own spikes within 2 ms of a copy
    (its refractory period holds)."""
    out = [tr.copy() for tr in trains]
    for i, u in enumerate(units):
        j = next((j for j in range(i + 1, len(units)) if units[j].shank == u.shank
                  and abs(units[j].y_um - u.y_um) >= OVERLAP_DISTANCE_UM), None)
        if j is None:
            continue
        pick = trains[i][rng.random(len(trains[i])) < OVERLAP_SHARE]
        copies = np.sort(pick + rng.uniform(-3e-4, 3e-4, len(pick)))
        copies = copies[(copies >= 0) & (copies < seconds)]
        own = out[j]
        if len(copies) and len(own):
            idx = np.searchsorted(copies, own)
            gap = np.minimum(np.abs(own - copies[np.clip(idx - 1, 0, len(copies) - 1)]),
                             np.abs(own - copies[np.clip(idx, 0, len(copies) - 1)]))
            own = own[gap >= 2e-3]
        merged = np.sort(np.concatenate([own, copies]))
        keep = np.concatenate([[True], np.diff(merged) >= 2e-3]) if len(merged) else np.ones(0, bool)
        out[j] = merged[keep]
    return out


def render_probe(sc: ProbeScenario, chunk_s: float = 1.0, progress: ProgressFn = None, cancel: CancelFn = None):
    """Yield ``(start, microvolts float32 chunk)`` covering the probe scenario in order."""
    bg = Background(sc)
    chunk = max(1, int(chunk_s * sc.rate_hz))
    pre = -int(TEMPLATE_MS[0] * sc.rate_hz / 1000)
    tlen = len(sc.units[0].template) if sc.units else 0
    for start in range(0, sc.n_samples, chunk):
        check(cancel)
        stop = min(start + chunk, sc.n_samples)
        x = bg.chunk(start, stop)
        lo, hi = np.searchsorted(sc.spike_sample, [start - tlen, stop + tlen])
        for s, ui, a in zip(sc.spike_sample[lo:hi], sc.spike_unit[lo:hi], sc.spike_scale[lo:hi]):
            u = sc.units[ui]
            gains = site_gains(sc.positions, sc.shank, u.shank, u.x_um, sc.unit_position(ui, s)[1])[0]
            on = np.flatnonzero(gains >= GAIN_FLOOR)
            i0 = s - pre - start
            a0, a1 = max(0, i0), min(stop - start, i0 + tlen)
            if a1 > a0:
                x[a0:a1, on] += np.outer(u.template[a0 - i0:a1 - i0] * a, gains[on]).astype(np.float32)
        add_artefacts(x, start, sc)
        report(progress, stop / sc.n_samples, "synthesising")
        yield start, x


def write_probe_synth(out, seconds: float = 20.0, sites: int = 64, columns: int = 2, pitch_um: float = 20.0,
                      shanks: int = 1, drift_um: float = 0.0, seed: int = 0, rate_hz: float = 30000.0,
                      progress: ProgressFn = None, cancel: CancelFn = None, overwrite: bool = False) -> ProbeScenario:
    """Write an int16 raw probe recording, its metadata file (with the ``[probe]`` table) and its
    ground truth (:func:`write_probe_truth`), each atomically;
    existing files are refused unless ``overwrite``. Parameters as :func:`make_probe_scenario`."""
    out = refuse_existing(out, overwrite)
    sc = make_probe_scenario(seconds, sites, columns, pitch_um, shanks, drift_um, seed, rate_hz)

    def write(tmp) -> None:
        with open(tmp, "wb") as fh:
            for _, x in render_probe(sc, progress=progress, cancel=cancel):
                np.clip(np.round(x / GAIN_UV), -32768, 32767).astype("<i2").tofile(fh)
    atomic_write(out, write)
    write_metadata(out, Layout(channels=sc.n_channels, rate_hz=float(rate_hz), dtype="int16", gain_uv=GAIN_UV,
                               x_um=sc.positions[:, 0].tolist(), y_um=sc.positions[:, 1].tolist(),
                               shank=sc.shank.tolist()))
    write_probe_truth(out, sc)
    return sc


UNIT_HEADER = ("unit", "group", "peak_channel", "peak_uv", "rate_hz", "kind",
               "shank", "x_um", "y_um", "drift_um", "amplitude_uv")


def write_probe_truth(out: Path, sc) -> None:
    """Write the two ground-truth CSV files of a :class:`~rigside.core.synthetic.probe_synth.ProbeScenario`."""
    def units(tmp: Path) -> None:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(UNIT_HEADER)
            for u in sc.units:
                gains = site_gains(sc.positions, sc.shank, u.shank, u.x_um, u.y_um)[0]
                peak = int(np.argmax(gains))
                w.writerow([u.unit, u.shank, peak, f"{u.amplitude_uv * gains[peak]:.1f}", f"{u.rate_hz:g}",
                            "probe", u.shank, f"{u.x_um:.2f}", f"{u.y_um:.2f}", f"{sc.drift_um:g}",
                            f"{u.amplitude_uv:.1f}"])
    write_truth_spikes(out, sc)
    atomic_write(out.with_name(out.stem + TRUTH_SUFFIXES[1]), units)
