"""Benchmark of `rigside.core.audit.run.run_audit`: 100 imported units, 10^6 spikes, against a session of a
10-minute 32-channel synthetic recording (rigside.core.synthetic.synth; the recording and session are written
to the work folder once and reused).

Imported units (invented): unit k starts from true unit k mod 24 with 10% of its spikes
removed and is topped up with random times to exactly 10^4 spikes. The baseline, measured in
the same run on the same data, is a straightforward version of the audit's two heavy parts:
matching by ``numpy.searchsorted`` for every imported x fresh pair (nearest spike within the
tolerance, not one-to-one), and main-channel amplitudes by filtering each group's channels
over the whole file with ``scipy.signal.sosfiltfilt`` and indexing the spike samples. It does
less than the audit (no waveforms, features or quality numbers), so the ratio is conservative.
Target of issue 6: the audit under 10 s.

Run: python bench/bench_audit.py [--workdir DIR] [--seconds 600] [--channels 32]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import signal

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rigside.core.audit.html_report import write_audit_report  # noqa: E402
from rigside.core.audit.run import CAUTION, FreshUnits, run_audit  # noqa: E402
from rigside.core.audit.table import write_audit_csv  # noqa: E402
from rigside.core.io.recording import open_recording  # noqa: E402
from rigside.core.io.spike_import import checked_trains  # noqa: E402
from rigside.core.params import Params  # noqa: E402
from rigside.core.runs.sort import run_sort  # noqa: E402
from rigside.core.signal.filtering import design_bandpass  # noqa: E402
from rigside.core.synthetic.synth import write_synth  # noqa: E402
from rigside.core.synthetic.truth import load_truth  # noqa: E402
from rigside.core.units.session import load_session  # noqa: E402

N_UNITS, PER_UNIT, TOL = 100, 10_000, 0.0005


def prepare(workdir: Path, seconds: float, channels: int):
    raw = workdir / f"audit_{int(seconds)}s_{channels}ch.bin"
    if not raw.exists():
        print(f"writing {raw} ...", flush=True)
        write_synth(raw, seconds, channels, seed=11)
    rec = open_recording(raw)
    session_path = raw.with_suffix(".session.h5")
    if session_path.exists():
        session = load_session(session_path)
    else:
        print("sorting (first pass) ...", flush=True)
        session = run_sort(rec, Params(), session_path)
    return rec, session, load_truth(raw.with_name(raw.stem + ".truth.csv"))


def imported_units(rec, truth, seed: int = 0):
    rng = np.random.default_rng(seed)
    inside = truth.sample < rec.n_samples
    ids = sorted(truth.unit_group)
    times, units = [], []
    for k in range(N_UNITS):
        t = truth.sample[inside & (truth.unit == ids[k % len(ids)])] / rec.rate_hz
        t = t[np.sort(rng.choice(len(t), int(0.9 * len(t)), replace=False))][:PER_UNIT]
        t = np.sort(np.concatenate([t, rng.uniform(0, rec.duration_s, PER_UNIT - len(t))]))
        times.append(t)
        units.append(np.full(len(t), k))
    return checked_trains(np.concatenate(times), np.concatenate(units), "bench")


def baseline(rec, spikes, fresh: FreshUnits) -> float:
    t0 = time.perf_counter()
    ev, assign = fresh.events, fresh.sorting.assignments
    fresh_trains = [np.sort(ev.time_s[assign == u]) for u in fresh.sorting.unit_ids()]
    ids, starts = spikes.bounds()
    for k in range(len(ids)):
        a = spikes.times_s[starts[k]:starts[k + 1]]
        for b in fresh_trains:
            if len(b):
                j = np.clip(np.searchsorted(b, a), 1, len(b) - 1)
                np.count_nonzero(np.minimum(np.abs(b[j] - a), np.abs(b[j - 1] - a)) <= TOL)
    sos = design_bandpass(Params().filter, rec.rate_hz)
    samples = np.clip(np.round(spikes.times_s * rec.rate_hz).astype(np.int64), 0, rec.n_samples - 1)
    for g in rec.groups:
        y = signal.sosfiltfilt(sos, rec.read(0, rec.n_samples, g), axis=0)
        _ = y[samples, 0]
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--workdir", type=Path, default=Path(tempfile.gettempdir()) / "rigside_bench")
    ap.add_argument("--seconds", type=float, default=600.0)
    ap.add_argument("--channels", type=int, default=32)
    args = ap.parse_args()
    args.workdir.mkdir(parents=True, exist_ok=True)
    rec, session, truth = prepare(args.workdir, args.seconds, args.channels)
    fresh = FreshUnits.from_session(session)
    spikes = imported_units(rec, truth)
    run_audit(rec, checked_trains(spikes.times_s[:2000], spikes.units[:2000], "warm-up"), fresh)   # compile once
    t0 = time.perf_counter()
    result = run_audit(rec, spikes, fresh)
    ours = time.perf_counter() - t0
    t0 = time.perf_counter()
    write_audit_csv(result, args.workdir / "bench_audit.csv", CAUTION)
    write_audit_report(result, args.workdir / "bench_audit.html")
    files = time.perf_counter() - t0
    base = baseline(rec, spikes, fresh)
    print(f"recording: {rec.duration_s:g} s, {rec.n_channels} channels; session: {len(session.events)} events, "
          f"{len(fresh.sorting.units)} units; imported: {len(result.imported_ids)} units, {len(spikes)} spikes")
    print(f"audit: {ours:.2f} s (target < 10 s); baseline: {base:.2f} s; ratio baseline/ours: {base / ours:.2f}")
    size = (args.workdir / "bench_audit.html").stat().st_size / 1e6
    print(f"table + report: {files:.2f} s ({files / ours:.2f} x the audit), report {size:.1f} MB")


if __name__ == "__main__":
    main()
