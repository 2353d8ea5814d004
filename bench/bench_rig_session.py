"""Rig-session benchmark: a generated 64-channel, 30 kHz int16 recording from raw to audit.

Each stage runs as the whole command in a fresh process (start-up included): detect, sort,
metrics, export, and the audit of 100 imported units (made from the session's own export with
some spikes dropped and some added); detection also runs in process. For every stage it prints
the wall time, its multiple of real time, the ratio to a plain baseline measured in the same run
(scipy / numpy / scikit-learn written the obvious way) and the peak memory of the command (the
child's own VmHWM), at each file length given; with two lengths or more, how much the peak of
``sort`` grows per 10^6 events from the shortest to the longest (flat memory: close to zero).

    python bench/bench_rig_session.py [--seconds 150 600] [--hour] [--channels 64] [--workdir DIR]

``--hour`` adds a 3600 s recording (about 14 GB of disk while it runs). Recordings go in a
temporary folder, removed at the end unless ``--workdir`` is given.
"""

from __future__ import annotations

import argparse
import csv
import os
import platform
import subprocess
import sys
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
from scipy import signal
from sklearn.decomposition import PCA
from sklearn.mixture import GaussianMixture

from rigside.core.events import EventTable
from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.signal.pipeline import detect
from rigside.core.synthetic.synth import write_synth

N_IMPORTED = 100
CHUNK_S = 1.0
MARGIN = 3000            # samples each side of a baseline chunk for the filter to settle
SNIPPET = (-10, 22)      # samples around an event cut by the baseline sort


CHILD = ("import atexit, runpy, sys\n"
         "sys.argv = ['rigside'] + sys.argv[1:]\n"
         "def peak():\n"
         "    hwm = [x for x in open('/proc/self/status') if x.startswith('VmHWM')]\n"
         "    print('VMHWM', hwm[0].split()[1] if hwm else 0, file=sys.stderr, flush=True)\n"
         "atexit.register(peak)   # the quick end of the process runs the exit functions\n"
         "runpy.run_module('rigside', run_name='__main__')\n")
"""The command, reporting its own peak RSS (VmHWM, kB): the wait4 figure of a child starts from the
parent's peak at fork on Linux, so it would carry the benchmark's own memory."""


def run_command(*argv: str | Path) -> tuple[float, float]:
    """Wall seconds and peak RSS (MB) of ``rigside ARGV`` in a fresh process."""
    cmd = [sys.executable, "-c", CHILD, *map(str, argv)]
    t = time.perf_counter()
    proc = subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    wall = time.perf_counter() - t
    if proc.returncode != 0:
        raise RuntimeError(f"rigside {' '.join(map(str, argv))} failed ({proc.returncode}): {proc.stderr[-800:]}")
    return wall, int(proc.stderr.rsplit("VMHWM", 1)[1].split()[0]) / 1024


def timed(fn, *args):
    t = time.perf_counter()
    out = fn(*args)
    return time.perf_counter() - t, out


def filtered_chunks(path: Path, seconds: float):
    """Plain chunked filtering: scipy sosfiltfilt on float64 chunks with margins."""
    rec = open_recording(path)
    rate = rec.rate_hz
    sos = signal.butter(3, [300, 6000], "bandpass", fs=rate, output="sos")
    n, chunk = int(seconds * rate), int(CHUNK_S * rate)
    for start in range(0, n, chunk):
        stop = min(n, start + chunk)
        lo, hi = max(0, start - MARGIN), min(n, stop + MARGIN)
        y = signal.sosfiltfilt(sos, rec.read(lo, hi).astype(np.float64), axis=0)
        yield start, y[start - lo:start - lo + stop - start]
    rec.close()


def baseline_detect(path: Path, seconds: float) -> int:
    """Median noise of the first chunk, then threshold crossings of -4.5 sigma in every chunk."""
    sigma, count = None, 0
    for _, y in filtered_chunks(path, seconds):
        if sigma is None:
            sigma = np.median(np.abs(y), axis=0) / 0.6745
        below = y < -4.5 * sigma
        count += int((below[1:] & ~below[:-1]).sum())
    return count


def baseline_sort(path: Path, seconds: float, events: EventTable, groups: list[np.ndarray]) -> int:
    """Snippets cut per chunk, then per group PCA (3 per channel) and a GaussianMixture chosen by BIC."""
    lo_w, hi_w = SNIPPET
    cuts: dict[int, list[np.ndarray]] = {g: [] for g in range(len(groups))}
    for start, y in filtered_chunks(path, seconds):
        sel = (events.sample >= start - lo_w) & (events.sample < start + len(y) - hi_w)
        for g in range(len(groups)):
            s = events.sample[sel & (events.group == g)] - start
            if len(s):
                idx = s[:, None] + np.arange(lo_w, hi_w)[None, :]
                cuts[g].append(y[idx][:, :, groups[g]].reshape(len(s), -1))
    n_units = 0
    for g, parts in cuts.items():
        if not parts:
            continue
        x = np.concatenate(parts)
        if len(x) < 20:
            continue
        z = PCA(3 * len(groups[g])).fit_transform(x)
        fits = [GaussianMixture(k, random_state=0).fit(z) for k in range(1, 5) if k < len(z)]
        n_units += min(fits, key=lambda m: m.bic(z)).n_components
    return n_units


def unit_times(export_dir: Path) -> dict[int, np.ndarray]:
    with open(export_dir / "unit_times.csv", encoding="utf-8") as fh:
        rows = [r for r in csv.DictReader(line for line in fh if not line.startswith("#"))]
    units: dict[int, list[float]] = {}
    for r in rows:
        units.setdefault(int(r["unit"]), []).append(float(r["time_s"]))
    return {u: np.asarray(t) for u, t in units.items()}


def baseline_metrics(units: dict[int, np.ndarray], seconds: float) -> int:
    """Rate and refractory violations (1.5 ms) per unit, numpy."""
    flagged = 0
    for t in units.values():
        isi = np.diff(np.sort(t))
        flagged += int((isi < 0.0015).mean() > 0.01) if len(isi) else 0
        _ = len(t) / seconds
    return flagged


def baseline_export(units: dict[int, np.ndarray], out: Path) -> int:
    """np.savetxt of every unit's times and np.save of each, the obvious way."""
    out.mkdir(exist_ok=True)
    rows = np.concatenate([np.column_stack([np.full(len(t), u), t]) for u, t in units.items()])
    np.savetxt(out / "unit_times.csv", rows, delimiter=",", header="unit,time_s", comments="")
    for u, t in units.items():
        np.save(out / f"unit_{u}.npy", t)
    return len(units)


def imported_units(units: dict[int, np.ndarray], seconds: float, seed: int = 0) -> dict[int, np.ndarray]:
    """100 imported units: session units in turn, each with 10% of its spikes dropped and 5% added."""
    rng = np.random.default_rng(seed)
    ids = sorted(u for u, t in units.items() if len(t) >= 20)
    out = {}
    for i in range(N_IMPORTED):
        t = units[ids[i % len(ids)]]
        kept = t[rng.random(len(t)) >= 0.10]
        added = rng.uniform(0.001, seconds - 0.001, max(1, len(t) // 20))
        out[i + 1] = np.sort(np.concatenate([kept, added]))
    return out


def write_imported(units: dict[int, np.ndarray], path: Path) -> None:
    with open(path, "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["unit", "time_s"])
        for u, t in units.items():
            w.writerows((u, f"{x:.6f}") for x in t)


def baseline_audit(imported: dict[int, np.ndarray], fresh: dict[int, np.ndarray], tol: float = 0.0005) -> int:
    """Matched spikes of every imported unit with every fresh unit, by searchsorted, pair by pair."""
    best = 0
    for a in imported.values():
        for b in fresh.values():
            i = np.clip(np.searchsorted(b, a), 1, max(1, len(b) - 1))
            near = np.minimum(np.abs(a - b[i - 1]), np.abs(a - b[np.minimum(i, len(b) - 1)]))
            best = max(best, int((near <= tol).sum()))
    return best


def in_process_detect(path: Path) -> float:
    rec = open_recording(path)
    t = time.perf_counter()
    detect(rec, Params())
    wall = time.perf_counter() - t
    rec.close()
    return wall


def one_length(work: Path, seconds: float, channels: int):
    """Every stage at one file length, yielded as it ends: (stage, command s, in-process s or None,
    baseline s, peak MB, events detected or None)."""
    rec = work / f"rec_{seconds:g}s.bin"
    write_synth(rec, seconds=seconds, channels=channels, seed=1)
    ev, session, exp = work / "ev.h5", work / "s.h5", work / "export"
    wall, rss = run_command("detect", rec, "--out", ev, "--quiet")
    inproc = in_process_detect(rec)
    base, _ = timed(baseline_detect, rec, seconds)
    yield ("detect", wall, inproc, base, rss, None)

    wall, rss = run_command("sort", rec, "--session", session, "--quiet", "--overwrite")
    events = EventTable.read_h5(ev)
    groups = [np.asarray(g) for g in open_recording(rec).groups]
    base, _ = timed(baseline_sort, rec, seconds, events, groups)
    yield ("sort", wall, None, base, rss, len(events))

    wall, rss = run_command("metrics", session, "--out", work / "m.csv", "--quiet")
    rss_metrics = rss
    wall_export, rss_export = run_command("export", session, "--out", exp, "--quiet")
    units = unit_times(exp)
    base, _ = timed(baseline_metrics, units, seconds)
    yield ("metrics", wall, None, base, rss_metrics, None)
    base, _ = timed(baseline_export, units, work / "plain_export")
    yield ("export", wall_export, None, base, rss_export, None)

    imported = imported_units(units, seconds)
    write_imported(imported, work / "imported.csv")
    wall, rss = run_command("audit", rec, "--sorted", work / "imported.csv", "--session", session,
                            "--out", work / "audit.html", "--table", work / "audit.csv", "--quiet")
    base, _ = timed(baseline_audit, imported, units)
    yield (f"audit ({N_IMPORTED} units)", wall, None, base, rss, None)
    for p in work.glob(f"{rec.stem}*"):
        p.unlink()


def report(seconds: float, channels: int, rows) -> tuple[int, float]:
    """Print one length's table; return its event count and the peak MB of ``sort``."""
    print(f"\n{channels} ch x {seconds:g} s (int16, 30 kHz, {channels * seconds * 30000 * 2 / 1e9:.2f} GB)")
    print(f"{'stage':<18}{'command s':>10}{'x real':>8}{'in-proc s':>10}{'x real':>8}"
          f"{'plain s':>9}{'plain/cmd':>10}{'peak MB':>9}", flush=True)
    sort = (0, 0.0)
    for stage, wall, inproc, base, rss, events in rows:
        ip = f"{inproc:10.2f}{seconds / inproc:8.0f}" if inproc else f"{'-':>10}{'-':>8}"
        print(f"{stage:<18}{wall:10.2f}{seconds / wall:8.1f}{ip}{base:9.2f}{base / wall:10.2f}{rss:9.0f}", flush=True)
        sort = (events, rss) if events is not None else sort
    return sort


def report_growth(sorts: list[tuple[int, float]]) -> None:
    """Peak memory of ``sort`` against the event count: flat when it does not grow with the file."""
    (n0, m0), (n1, m1) = min(sorts), max(sorts)
    if n1 > n0:
        print(f"\nsort peak MB: {m0:.0f} at {n0:,} events, {m1:.0f} at {n1:,}: "
              f"{(m1 - m0) / (n1 - n0) * 1e6:+.0f} MB per 10^6 events ({m1 / m0:.2f}x for {n1 / n0:.1f}x the events)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--seconds", type=float, nargs="+", default=[600.0], help="file lengths (default 600)")
    ap.add_argument("--hour", action="store_true", help="also a 3600 s recording")
    ap.add_argument("--channels", type=int, default=64)
    ap.add_argument("--workdir", type=Path, help="keep the outputs here (default: a temporary folder)")
    args = ap.parse_args()
    lengths = list(args.seconds) + ([3600.0] if args.hour else [])
    print(f"rigside rig-session benchmark, {datetime.now(timezone.utc):%Y-%m-%d %H:%M} UTC, "
          f"{platform.processor() or platform.machine()}, {os.cpu_count()} cores, "
          f"load average {os.getloadavg()[0]:.1f}", flush=True)
    with tempfile.TemporaryDirectory(dir=args.workdir) as tmp:
        sorts = [report(seconds, args.channels, one_length(Path(tmp), seconds, args.channels)) for seconds in lengths]
    if len(sorts) > 1:
        report_growth(sorts)
    print("\nplain/cmd > 1: the command is faster than the plain baseline; peak MB: max RSS of the command.")


if __name__ == "__main__":
    main()
