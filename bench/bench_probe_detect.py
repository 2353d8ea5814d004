"""Benchmark of `rigside detect` on synthetic 384-site, 30 kHz int16 probe recordings.

Prints, from one run: throughput in multiples of real time of the whole command (a fresh process,
start-up and noise estimate included) at two file lengths (4x apart) with each command's peak RSS
(VmHWM) and CPU time (on a shared machine the CPU seconds show the work, the wall clock what a
user waits), the pipeline in-process split into noise estimate, filtering and peak search, and
the speed ratio against a plain numpy/scipy baseline measured
in the same run on the same file (whole-array scipy.signal.sosfiltfilt, median noise, a running
maximum over time by scipy.ndimage.maximum_filter1d, then the maximum over each site's
neighbourhood with numpy). It also times building the neighbourhoods on the cell grid against
an all-pairs distance matrix, and prints the mean neighbourhood size (the per-sample cost of the
search is sites x that size, not sites^2).

    python bench/bench_probe_detect.py [--seconds 10] [--workdir DIR]
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import ndimage, signal

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rigside.core.io.recording import open_recording  # noqa: E402
from rigside.core.params import Params  # noqa: E402
from rigside.core.signal.filtering import BandPass  # noqa: E402
from rigside.core.signal.neighbourhoods import neighbourhoods  # noqa: E402
from rigside.core.signal.noise import estimate_noise  # noqa: E402
from rigside.core.signal.pipeline import detect  # noqa: E402
from rigside.core.signal.probe_detection import detect_probe_block  # noqa: E402
from rigside.core.synthetic.probe_synth import write_probe_synth  # noqa: E402

SITES = 384


def run_detect(path: Path) -> tuple[float, float, float]:
    """Wall time, own peak RSS (MB, VmHWM) and CPU seconds of `rigside detect` in a fresh process."""
    code = ("import sys; from rigside.cli.main import main; rc = main(sys.argv[1:]); "
            "print('HWM', [l for l in open('/proc/self/status') if l.startswith('VmHWM')][0].split()[1]); "
            "sys.exit(rc)")
    t, cpu = time.perf_counter(), os.times()
    r = subprocess.run([sys.executable, "-c", code, "detect", str(path), "--out", str(path.with_suffix(".h5")),
                        "--quiet"], cwd=ROOT, capture_output=True, text=True, check=True)
    wall, done = time.perf_counter() - t, os.times()
    used = done.children_user + done.children_system - cpu.children_user - cpu.children_system
    return wall, int(r.stdout.split("HWM")[1].split()[0].strip("'],")) / 1024, used


def stages(rec, params: Params) -> tuple[float, float, float]:
    """CPU seconds of the process for the noise estimate (its worker threads included), and per
    recorded second for filtering 1 s chunks and for the peak search on them (one thread, no pool)."""
    c = time.process_time()
    noise = estimate_noise(rec, params)
    t_noise = time.process_time() - c
    bp = BandPass(rec, params.filter)
    nbh = neighbourhoods(rec.positions, rec.shank, params.probe.radius_um)
    rate, n = int(rec.rate_hz), min(rec.n_samples, int(8 * rec.rate_hz))
    ctx = int(rate / 1000) + 2
    t_filter = t_search = 0.0
    for start in range(0, n - rate + 1, rate):
        c = time.thread_time()
        lo, hi = max(0, start - ctx), min(rec.n_samples, start + rate + ctx)
        y = bp.read(lo, hi)
        t_filter += time.thread_time() - c
        c = time.thread_time()
        detect_probe_block(y, lo, start - lo, start + rate - lo, noise.sigma_uv, nbh, rec.positions,
                           rec.channel_group, "negative", params.detect.threshold_sigma, int(rate / 1000),
                           params.detect.artefact_sigma, params.detect.artefact_channel_fraction, int(rate / 2000),
                           int(0.2 * rate / 1000))
        t_search += time.thread_time() - c
    seconds = (n // rate) or 1
    return t_noise, t_filter / seconds, t_search / seconds


def baseline(path: Path, seconds: float, radius_um: float) -> tuple[float, int]:
    """Plain numpy/scipy spatio-temporal peaks on the first ``seconds``: wall time and event count."""
    rec = open_recording(path)
    n = int(seconds * rec.rate_hz)
    t = time.perf_counter()
    x = rec.read(0, n).astype(np.float64)
    sos = signal.butter(3, [300, 6000], "bandpass", fs=rec.rate_hz, output="sos")
    y = signal.sosfiltfilt(sos, x, axis=0).astype(np.float32)
    z = -y / (np.median(np.abs(y), axis=0) / 0.6745).astype(np.float32)
    dead = int(round(0.001 * rec.rate_hz))
    in_time = ndimage.maximum_filter1d(z, 2 * dead + 1, axis=0)
    nb = neighbourhoods(rec.positions, rec.shank, radius_um)
    best = np.empty_like(z)
    for c in range(rec.n_channels):
        best[:, c] = in_time[:, nb.of(c)].max(axis=1)
    count = int(((z >= 4.5) & (z == best)).sum())
    return time.perf_counter() - t, count


def neighbourhood_build(positions, shank, radius_um) -> tuple[float, float]:
    """Seconds to build the neighbourhoods on the cell grid, and with an all-pairs distance matrix."""
    t = time.perf_counter()
    for _ in range(20):
        neighbourhoods(positions, shank, radius_um)
    tree = (time.perf_counter() - t) / 20
    t = time.perf_counter()
    for _ in range(20):
        d = np.hypot(*(positions[:, None, :] - positions[None, :, :]).transpose(2, 0, 1))
        [np.flatnonzero((d[c] <= radius_um) & (shank == shank[c])) for c in range(len(positions))]
    return tree, (time.perf_counter() - t) / 20


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--seconds", type=float, default=10.0, help="length of the short file (the long is 4x)")
    ap.add_argument("--workdir", help="where to write the recordings (default: a temporary folder)")
    a = ap.parse_args()
    work = Path(a.workdir or tempfile.mkdtemp(prefix="rigside-bench-probe-"))
    short, long_ = work / "short.bin", work / "long.bin"
    for p, s in ((short, a.seconds), (long_, 4 * a.seconds)):
        if not p.exists():
            write_probe_synth(p, seconds=s, sites=SITES, seed=1)
    run_detect(short)  # warm the compiled kernels' cache
    w_s, m_s, c_s = run_detect(short)
    w_l, m_l, c_l = run_detect(long_)
    rec = open_recording(long_)
    detect(rec, Params())  # warm
    t = time.perf_counter()
    events = detect(rec, Params())
    w_p = time.perf_counter() - t
    t_noise, t_filter, t_search = stages(rec, Params())
    base_s = min(a.seconds, 4.0)
    w_b, n_b = baseline(short, base_s, Params().probe.radius_um)
    tree, pairs = neighbourhood_build(rec.positions, rec.shank, Params().probe.radius_um)
    sizes = neighbourhoods(rec.positions, rec.shank, Params().probe.radius_um).sizes
    print(f"{SITES} sites (2 columns, 20 um pitch), 30 kHz, int16; short file {a.seconds:g} s, "
          f"long {4 * a.seconds:g} s")
    print(f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    for name, secs, w, m, c in (("short", a.seconds, w_s, m_s, c_s), ("long ", 4 * a.seconds, w_l, m_l, c_l)):
        print(f"detect, {name}: {w:6.2f} s wall = {secs / w:6.1f}x real time, peak RSS {m:6.0f} MB, "
              f"{c:6.2f} CPU s (= {2 * secs / c:5.1f}x real time if both cores were free)")
    print(f"marginal cost of the extra {3 * a.seconds:g} s: {(w_l - w_s):.2f} s wall = "
          f"{3 * a.seconds / (w_l - w_s):.1f}x real time; {(c_l - c_s):.2f} CPU s")
    print(f"peak memory ratio long/short: {m_l / m_s:.2f} (flat = 1.0)")
    print(f"pipeline in-process, long: {w_p:6.2f} s = {rec.duration_s / w_p:6.1f}x real time "
          f"({len(events):,} events down to the floor)")
    print(f"stages, one thread (CPU): noise estimate {t_noise:.2f} s once; per recorded second filtering "
          f"{t_filter * 1e3:.0f} ms, peak search {t_search * 1e3:.0f} ms")
    print(f"numpy/scipy baseline in-process on {base_s:g} s: {w_b:.2f} s = {base_s / w_b:.2f}x real time "
          f"({n_b:,} peaks)")
    print(f"speed ratio pipeline / baseline (per recorded second, both in-process): "
          f"{(w_b / base_s) / (w_p / rec.duration_s):.1f}x")
    print(f"neighbourhoods: cell grid {tree * 1e3:.2f} ms, all-pairs matrix {pairs * 1e3:.2f} ms "
          f"(ratio {pairs / tree:.1f}x); mean neighbourhood {sizes.mean():.1f} sites, largest {sizes.max()}")
    print("(command wall times include interpreter start-up, about 1-3 s, and the noise estimate)")


if __name__ == "__main__":
    main()
