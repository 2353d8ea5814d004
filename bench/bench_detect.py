"""Benchmark of `rigside detect` on generated 64-channel, 30 kHz int16 recordings.

Prints, from one run: throughput in multiples of real time of the whole command (a fresh
process, start-up included) at two file lengths (4x apart) and of the pipeline in-process
(noise + detection), peak memory (max RSS of the command) at both lengths, and the speed
ratio against a naive in-process baseline measured in the same run (whole-array
scipy.signal.sosfiltfilt, numpy median noise, numpy threshold crossings).

    python bench/bench_detect.py [--seconds 60] [--workdir DIR]
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import signal

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rigside.core.io.recording import open_recording  # noqa: E402
from rigside.core.params import Params  # noqa: E402
from rigside.core.signal.pipeline import detect  # noqa: E402
from rigside.core.synthetic.synth import write_synth  # noqa: E402


def run_detect(path: Path) -> tuple[float, float]:
    """Wall time and peak RSS (MB) of `rigside detect` in a fresh process."""
    code = ("import sys, resource; from rigside.cli.main import main; rc = main(sys.argv[1:]); "
            "print('MAXRSS', resource.getrusage(resource.RUSAGE_SELF).ru_maxrss); sys.exit(rc)")
    t = time.perf_counter()
    r = subprocess.run([sys.executable, "-c", code, "detect", str(path), "--out", str(path.with_suffix(".h5")),
                        "--quiet"], cwd=ROOT, capture_output=True, text=True, check=True)
    wall = time.perf_counter() - t
    rss = int(r.stdout.split("MAXRSS")[1].split()[0]) / 1024
    return wall, rss


def naive(path: Path, seconds: float) -> float:
    """Whole-array baseline: sosfiltfilt, median noise, threshold crossings with dead time."""
    rec = open_recording(path)
    n = int(seconds * rec.rate_hz)
    t = time.perf_counter()
    x = rec.read(0, n).astype(np.float64)
    sos = signal.butter(3, [300, 6000], "bandpass", fs=rec.rate_hz, output="sos")
    y = signal.sosfiltfilt(sos, x, axis=0)
    sigma = np.median(np.abs(y), axis=0) / 0.6745
    below = y < -4.5 * sigma
    starts = below[1:] & ~below[:-1]
    count = int(starts.sum())
    wall = time.perf_counter() - t
    assert count > 0
    return wall


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--seconds", type=float, default=60.0, help="length of the short file (the long is 4x)")
    ap.add_argument("--workdir", help="where to write the recordings (default: a temporary folder)")
    a = ap.parse_args()
    work = Path(a.workdir or tempfile.mkdtemp(prefix="rigside-bench-"))
    short, long_ = work / "short.bin", work / "long.bin"
    for p, s in ((short, a.seconds), (long_, 4 * a.seconds)):
        if not p.exists():
            write_synth(p, seconds=s, channels=64, seed=1)
    run_detect(short)  # warm the compiled kernels' cache
    w_s, m_s = run_detect(short)
    w_l, m_l = run_detect(long_)
    base_s = min(a.seconds, 30.0)
    w_n = naive(short, base_s)
    rec = open_recording(long_)
    detect(rec, Params())  # warm
    t = time.perf_counter()
    detect(rec, Params())
    w_p = time.perf_counter() - t
    ours_per_s = w_p / rec.duration_s
    naive_per_s = w_n / base_s
    print(f"64 channels, 30 kHz, int16; short file {a.seconds:g} s, long file {4 * a.seconds:g} s")
    print(f"detect, short: {w_s:6.2f} s wall = {a.seconds / w_s:6.1f}x real time, peak RSS {m_s:6.0f} MB")
    print(f"detect, long : {w_l:6.2f} s wall = {4 * a.seconds / w_l:6.1f}x real time, peak RSS {m_l:6.0f} MB")
    print(f"peak memory ratio long/short: {m_l / m_s:.2f} (flat = 1.0)")
    print(f"pipeline in-process, long: {w_p:6.2f} s = {rec.duration_s / w_p:6.1f}x real time (noise + detection)")
    print(f"naive baseline in-process on {base_s:g} s: {w_n:.2f} s = {base_s / w_n:.1f}x real time")
    print(f"speed ratio pipeline / naive (per recorded second, both in-process): {naive_per_s / ours_per_s:.1f}x")
    print("(command wall times include interpreter start-up, about 1-3 s, and the noise estimate)")


if __name__ == "__main__":
    main()
