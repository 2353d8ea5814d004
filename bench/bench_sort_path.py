"""Benchmark of the sorting path: `rigside detect` and `rigside sort` on generated 64-channel files.

For each length (default 150 s and 600 s, 4x apart) a recording is generated in a temporary
folder with `python3 -m rigside synth`, then printed:
1. `detect` and `sort` as whole commands (fresh processes, start-up included): wall time,
   multiple of real time, sort / detect ratio, and peak memory: the largest RSS of the command's
   process and the largest sum over the command and its worker processes (sampled every 20 ms);
2. the stages in this process: detection, features, first pass (workers 1 and 2);
3. baselines measured in the same run, written the obvious way:
   - features cut per event: each window filtered on its own (with the filter's margin) and
     aligned, then scikit-learn PCA fitted on the same subset size and applied, timed on a
     sample of events and scaled to all events;
   - first pass without subsampling: one scikit-learn GaussianMixture (full covariances, the
     component count our run chose) fitted on every event of a group, timed on a few groups and
     scaled to all groups (a lower bound: no BIC search);
   - with --threads, the first pass spread over a thread pool instead of processes.

    python bench/bench_sort_path.py [--seconds 150 600] [--channels 64]
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import psutil

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rigside.core.io.recording import open_recording  # noqa: E402
from rigside.core.params import Params  # noqa: E402
from rigside.core.signal.features import compute_features, usable_channels  # noqa: E402
from rigside.core.signal.filtering import BandPass  # noqa: E402
from rigside.core.signal.pipeline import detect, thresholds_sigma  # noqa: E402
from rigside.core.signal.snippets import align_subsample, snippet_window  # noqa: E402
from rigside.core.units.clustering import cluster_features, first_pass_assignments  # noqa: E402


def run_command(args: list[str]) -> tuple[float, float, float]:
    """Wall time, peak RSS of the main process and peak summed RSS of its process tree (MB)."""
    t = time.perf_counter()
    proc = psutil.Popen([sys.executable, "-m", "rigside", *args], cwd=ROOT,
                        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    main_peak = tree_peak = 0
    while proc.poll() is None:
        try:
            rss = proc.memory_info().rss
            kids = sum(c.memory_info().rss for c in proc.children(recursive=True))
        except psutil.Error:
            continue
        main_peak, tree_peak = max(main_peak, rss), max(tree_peak, rss + kids)
        time.sleep(0.02)
    wall = time.perf_counter() - t
    if proc.returncode != 0:
        raise SystemExit(f"{args[0]} failed: {proc.stderr.read().decode()}")
    return wall, main_peak / 2**20, tree_peak / 2**20


def timed(fn, *args, **kw):
    t = time.perf_counter()
    out = fn(*args, **kw)
    return time.perf_counter() - t, out


def per_event_features(rec, ev, p: Params, sample: np.ndarray) -> float:
    """Seconds per event of the obvious path: filter each window on its own, align, PCA."""
    from sklearn.decomposition import PCA
    bp = BandPass(rec, p.filter)
    before, after = snippet_window(p.snippets, rec.rate_hz)
    t = time.perf_counter()
    for g in np.unique(ev.group[sample]):
        rows = sample[ev.group[sample] == g]
        channels = usable_channels(rec.groups[int(g)], ev.excluded)
        own = np.array([list(channels).index(c) for c in ev.channel[rows]])
        padded = np.stack([bp.read(max(0, s - before - 1), min(rec.n_samples, s + after + 1), channels)
                           for s in ev.sample[rows] if before + 1 <= s < rec.n_samples - after - 1])
        snips = align_subsample(padded, own[:len(padded)], before).reshape(len(padded), -1)
        PCA(n_components=p.snippets.n_pcs).fit(snips).transform(snips)
    return (time.perf_counter() - t) / len(sample)


def unsubsampled_fit(ev, values, assign, unit_group, groups: list[int]) -> float:
    """Seconds for one full-data GaussianMixture per group in ``groups``."""
    from sklearn.mixture import GaussianMixture
    t = time.perf_counter()
    for g in groups:
        rows = np.flatnonzero((ev.group == g) & ~ev.artefact)
        x = values[rows].astype(np.float64)
        x = (x - x.mean(0)) / np.where(x.std(0) > 0, x.std(0), 1)
        k = max(1, sum(1 for u, gg in unit_group.items() if gg == g))
        GaussianMixture(n_components=k, covariance_type="full", random_state=0).fit(x)
    return time.perf_counter() - t


def bench_length(seconds: float, channels: int, threads: bool) -> dict:
    with tempfile.TemporaryDirectory(prefix="rigside-bench-") as tmp:
        raw = Path(tmp) / "rec.bin"
        subprocess.run([sys.executable, "-m", "rigside", "synth", str(raw), "--seconds", str(seconds),
                        "--channels", str(channels), "--seed", "0", "--quiet"], cwd=ROOT, check=True,
                       stdout=subprocess.DEVNULL)
        det = run_command(["detect", str(raw), "--out", str(Path(tmp) / "ev.h5"), "--quiet"])
        srt = run_command(["sort", str(raw), "--session", str(Path(tmp) / "s.h5"), "--quiet"])
        rec = open_recording(raw)
        p = Params()
        t_det, table = timed(detect, rec, p)
        ev = table.subset(table.mask(threshold_sigma=thresholds_sigma(p, table.sigma_uv), include_artefacts=True))
        t_feat, feats = timed(compute_features, rec, ev, p)
        fp = {}
        for w in (1, 2):
            fp[w], (assign, unit_group) = timed(first_pass_assignments, ev.group, ev.artefact, feats.values,
                                                ev.amplitude_uv, p.cluster, workers=w)
        if threads:
            def one(g):
                rows = np.flatnonzero((ev.group == g) & ~ev.artefact)
                return cluster_features(feats.values[rows], p.cluster, stream=int(g))
            t = time.perf_counter()
            with ThreadPoolExecutor(2) as pool:
                list(pool.map(one, np.unique(ev.group)))
            fp["threads"] = time.perf_counter() - t
        sample = np.sort(np.random.default_rng(0).choice(len(ev), min(len(ev), 4000), replace=False))
        naive_feat = per_event_features(rec, ev, p, sample) * len(ev)
        groups = sorted(set(int(g) for g in np.unique(ev.group)))
        few = groups[:4]
        naive_fit = unsubsampled_fit(ev, feats.values, assign, unit_group, few) * len(groups) / len(few)
        rec.close()
    return {"seconds": seconds, "events": len(ev), "detect": det, "sort": srt, "t_det": t_det,
            "t_feat": t_feat, "fp": fp, "naive_feat": naive_feat, "naive_fit": naive_fit}


def report(r: dict) -> None:
    s = r["seconds"]
    (dw, dm, dt), (sw, sm, st) = r["detect"], r["sort"]
    print(f"\n== {r['channels']} ch x {s:g} s, {r['events']} events ==")
    print(f"detect command : {dw:6.2f} s ({s / dw:5.1f}x real time)  peak RSS {dm:6.0f} MB (tree {dt:6.0f} MB)")
    print(f"sort command   : {sw:6.2f} s ({s / sw:5.1f}x real time)  peak RSS {sm:6.0f} MB (tree {st:6.0f} MB)"
          f"  sort/detect {sw / dw:4.2f}")
    print(f"in process     : detection {r['t_det']:.2f} s, features {r['t_feat']:.2f} s, first pass "
          f"{r['fp'][1]:.2f} s (1 worker) / {r['fp'][2]:.2f} s (2 processes)"
          + (f" / {r['fp']['threads']:.2f} s (2 threads)" if "threads" in r["fp"] else ""))
    print(f"baselines      : per-event features {r['naive_feat']:.1f} s (x{r['naive_feat'] / r['t_feat']:.1f} ours), "
          f"unsubsampled mixture fits {r['naive_fit']:.1f} s (x{r['naive_fit'] / r['fp'][2]:.1f} ours)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, nargs="+", default=[150.0, 600.0])
    ap.add_argument("--channels", type=int, default=64)
    ap.add_argument("--threads", action="store_true", help="also time the first pass in a thread pool")
    args = ap.parse_args()
    import rigside.core
    print(f"code under test: {rigside.core.__path__[0]}")
    print(f"machine: {psutil.cpu_count()} cores, load average {psutil.getloadavg()} at start "
          "(shared with other jobs: figures vary from run to run)")
    results = []
    for s in args.seconds:
        r = bench_length(s, args.channels, args.threads)
        r["channels"] = args.channels
        report(r)
        results.append(r)
    if len(results) > 1:
        a, b = results[0], results[-1]
        print(f"\npeak RSS of sort: {a['sort'][1]:.0f} MB at {a['seconds']:g} s, {b['sort'][1]:.0f} MB at "
              f"{b['seconds']:g} s (x{b['seconds'] / a['seconds']:g} length); load average now {psutil.getloadavg()}")


if __name__ == "__main__":
    main()
