"""Benchmark of the parts that grow with spikes and units: the audit's shared-spike matrix,
CSV writing of events and of unit_times.csv, and importing a large CSV of spike times.

Invented data. Matching: a fresh sorting of ``--units`` units and ``--spikes`` spikes over
``--seconds`` s, and an imported sorting made from it (10% of spikes dropped, 10% added at
random, 0.1 ms jitter, units renumbered), laid out as the audit passes them (imported spikes
grouped by unit, fresh spikes in time order). Each new path runs beside a plain baseline measured
in the same run on the same data, written the obvious way:

- matching: a mask per unit and :func:`core.matching.match_times` for every unit pair;
- CSV writing: the ``csv`` module with f-string numbers row by row (event table) and an
  f-string per row (unit_times.csv); HDF5 of the same event table for scale;
- CSV import: ``numpy.loadtxt`` of the whole file. Each import runs in a fresh subprocess
  that reports its peak resident memory (VmHWM of /proc/self/status: Linux) and its peak after
  the imports, before reading; both versions end with the same checks (:func:`core.spike_import.checked_trains`).

Issue 12 targets: matching of 200 units / 3x10^6 spikes under 3 s; import of 10^7 rows under
1 GB peak. ``--full`` sets the issue's sizes (3x10^6 spikes, 10^6 written rows, 10^7 imported rows).

Run: python bench/bench_scale_io.py [--full] [--spikes N] [--units N] [--rows N] [--import-rows N]
"""

from __future__ import annotations

import argparse
import csv
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rigside.core.events import EventTable  # noqa: E402
from rigside.core.exports.units import write_unit_times  # noqa: E402
from rigside.core.io.csv_text import write_rows  # noqa: E402
from rigside.core.quality.matching import match_times, shared_spike_matrix  # noqa: E402
from rigside.core.units.sorting import LABELS  # noqa: E402

TOL = 0.0005


def timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def sortings(n_spikes: int, n_units: int, seconds: float, seed: int = 0):
    rng = np.random.default_rng(seed)
    tb = rng.uniform(0, seconds, n_spikes)
    ub = rng.integers(0, n_units, n_spikes)
    keep = rng.random(n_spikes) < 0.9
    n_new = n_spikes - int(keep.sum())
    ta = np.concatenate([tb[keep] + rng.normal(0, 1e-4, keep.sum()), rng.uniform(0, seconds, n_new)])
    ua = np.concatenate([rng.permutation(n_units)[ub[keep]], rng.integers(0, n_units, n_new)]) + 1000
    ta = np.clip(ta, 0, seconds)
    oa, ob = np.lexsort((ta, ua)), np.argsort(tb)      # the audit's layout: imported by unit, fresh by time
    return ta[oa], ua[oa], tb[ob], ub[ob]


def baseline_matrix(ta, ua, tb, ub, tol):
    ids_a, ids_b = np.unique(ua), np.unique(ub)
    trains_a = [np.sort(ta[ua == u]) for u in ids_a]
    trains_b = [np.sort(tb[ub == u]) for u in ids_b]
    out = np.zeros((len(ids_a), len(ids_b)), dtype=np.int64)
    for i, a in enumerate(trains_a):
        for j, b in enumerate(trains_b):
            out[i, j] = len(match_times(a, b, tol)[0])
    return out


def bench_matching(args) -> None:
    ta, ua, tb, ub = sortings(args.spikes, args.units, args.seconds)
    shared_spike_matrix(ta[:1000], ua[:1000], tb[:1000], ub[:1000], TOL)        # compile once
    match_times(np.sort(ta[:10]), np.sort(tb[:10]), TOL)
    ours, (_, _, m) = timed(lambda: shared_spike_matrix(ta, ua, tb, ub, TOL))
    base, ref = timed(lambda: baseline_matrix(ta, ua, tb, ub, TOL))
    print(f"matching {args.units}x{args.units} units, {len(ta)} vs {len(tb)} spikes: ours {ours:.2f} s "
          f"(target < 3 s at 3x10^6), per-pair masks {base:.2f} s, ratio {base / ours:.1f}x, "
          f"equal counts: {bool(np.array_equal(m, ref))}")


def events_table(n: int, seed: int = 1) -> EventTable:
    rng = np.random.default_rng(seed)
    return EventTable(sample=np.sort(rng.integers(0, 108_000_000, n)), channel=rng.integers(0, 64, n),
                      group=rng.integers(0, 16, n), amplitude_uv=rng.normal(-60, 40, n),
                      amplitude_sigma=rng.gamma(6, 1, n), artefact=rng.random(n) < 0.02, rate_hz=30000.0,
                      n_samples=108_000_000, sigma_uv=np.ones(64), floor_sigma=4.0)


def csv_module_events(ev: EventTable, path: Path) -> None:
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["sample", "time_s", "channel", "group", "amplitude_uv", "amplitude_sigma", "artefact"])
        w.writerows(zip(ev.sample.tolist(), (f"{t:.6f}" for t in ev.time_s), ev.channel.tolist(),
                        ev.group.tolist(), (f"{a:.3f}" for a in ev.amplitude_uv),
                        (f"{a:.4f}" for a in ev.amplitude_sigma), ev.artefact.astype(int).tolist()))


def bench_writing(args, work: Path) -> None:
    ev = events_table(args.rows)
    ev.subset(np.arange(100)).write_csv(work / "warm.csv")                      # compile once
    ours, _ = timed(lambda: ev.write_csv(work / "events.csv"))
    base, _ = timed(lambda: csv_module_events(ev, work / "events_base.csv"))
    h5, _ = timed(lambda: ev.write_h5(work / "events.h5"))
    same = (work / "events.csv").read_bytes() == (work / "events_base.csv").read_bytes()
    print(f"event CSV, {len(ev)} rows: ours {ours:.2f} s, csv module {base:.2f} s, ratio {base / ours:.1f}x, "
          f"same bytes: {same}; HDF5 {h5:.2f} s")
    rng = np.random.default_rng(2)
    unit = rng.integers(1, 201, len(ev))
    trains = {int(u): ev.time_s[unit == u] for u in range(1, 201)}
    labels = {u: LABELS[u % len(LABELS)] for u in trains}
    write_unit_times(work / "warm_units.csv", {1: trains[1][:10]}, labels)              # compile once
    ours, _ = timed(lambda: write_unit_times(work / "unit_times.csv", trains, labels))
    t0 = time.perf_counter()
    with open(work / "unit_times_base.csv", "w", newline="") as fh:
        fh.write("unit,label,time_s\n")
        for u, t in trains.items():
            fh.writelines(f"{u},{labels[u]},{x:.7f}\n" for x in t)
    base = time.perf_counter() - t0
    same = (work / "unit_times.csv").read_bytes() == (work / "unit_times_base.csv").read_bytes()
    print(f"unit_times.csv, {len(ev)} spikes in {len(trains)} units: ours {ours:.2f} s, f-string rows {base:.2f} s, "
          f"ratio {base / ours:.1f}x, same bytes: {same}")


CHILD = """
import json, sys, time
import numpy as np
from rigside.core.io.spike_import import checked_trains
from rigside.core.io.spike_import_files import load_spikes
kind, path = sys.argv[1], sys.argv[2]
def peak_mb():   # high-water mark of this process since exec (VmHWM), in MB
    line = next(x for x in open("/proc/self/status") if x.startswith("VmHWM"))
    return int(line.split()[1]) / 1024
start = peak_mb()
t0 = time.perf_counter()
if kind == "ours":
    n = len(load_spikes(path))
else:
    data = np.loadtxt(path, delimiter=",", skiprows=1, dtype=[("unit", "i8"), ("time_s", "f8")])
    n = len(checked_trains(data["time_s"], data["unit"], path))
print(json.dumps({"seconds": time.perf_counter() - t0, "peak_mb": peak_mb(), "start_mb": start, "rows": n}))
"""


def bench_import(args, work: Path) -> None:
    rng = np.random.default_rng(3)
    n = args.import_rows
    path = work / "spikes.csv"
    units = rng.integers(0, 200, n)
    times = np.sort(rng.uniform(0, 3600, n))
    with open(path, "wb") as fh:
        fh.write(b"unit,time_s\n")
        write_rows(fh, [("int", units), ("fixed", times, 6)])
    res = {}
    for kind in ("ours", "loadtxt"):
        run = subprocess.run([sys.executable, "-c", CHILD, kind, str(path)], cwd=ROOT, capture_output=True,
                             text=True, check=True)
        res[kind] = json.loads(run.stdout)
    o, b = res["ours"], res["loadtxt"]
    print(f"CSV import of {o['rows']} rows ({path.stat().st_size / 1e6:.0f} MB): ours {o['seconds']:.2f} s, "
          f"peak {o['peak_mb']:.0f} MB (after imports {o['start_mb']:.0f} MB; target < 1 GB at 10^7 rows); "
          f"numpy.loadtxt {b['seconds']:.2f} s, peak {b['peak_mb']:.0f} MB (after imports {b['start_mb']:.0f} MB); "
          f"time ratio {b['seconds'] / o['seconds']:.2f}x")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--full", action="store_true", help="the issue's sizes")
    ap.add_argument("--spikes", type=int, default=1_000_000)
    ap.add_argument("--units", type=int, default=200)
    ap.add_argument("--seconds", type=float, default=600.0)
    ap.add_argument("--rows", type=int, default=300_000)
    ap.add_argument("--import-rows", type=int, default=3_000_000)
    args = ap.parse_args()
    if args.full:
        args.spikes, args.rows, args.import_rows = 3_000_000, 1_000_000, 10_000_000
    with tempfile.TemporaryDirectory() as tmp:
        bench_matching(args)
        bench_writing(args, Path(tmp))
        bench_import(args, Path(tmp))


if __name__ == "__main__":
    main()
