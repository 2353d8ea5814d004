"""Benchmark of the overlap pass of ``sort``: spikes recovered against ground truth, and its cost.

Prints, from one run:
1. on demo recordings with ground truth (``--seeds`` seeds of the demo scenario, ``--seconds`` long,
   16 channels), the true spikes within 1 ms of a spike of another unit of the same group
   ("overlapping"), and how many of them no event pairs with (within 0.5 ms, one-to-one per group)
   with the detected events only (before) and with the recovered events too (after); the share of the
   finds that pair with a spike no detected event took; and the overlapping spikes held by the unit
   paired with their true unit (Hungarian pairing, ``scipy.optimize.linear_sum_assignment``, on shared
   spikes within 0.5 ms) after the first pass and after the overlap pass;
2. on a ``--channels`` x ``--rig-seconds`` demo, the time of each stage in process: detection (the
   baseline), features, first pass and the overlap pass, and the overlap pass's ratio to detection.

    python bench/bench_overlaps.py [--seeds 5] [--seconds 60] [--channels 64] [--rig-seconds 120]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy.optimize import linear_sum_assignment

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rigside.core.io.recording import open_recording  # noqa: E402
from rigside.core.params import Params  # noqa: E402
from rigside.core.quality.matching import match_times, shared_spike_matrix  # noqa: E402
from rigside.core.runs.sort import sort_recording  # noqa: E402
from rigside.core.signal.features import compute_features  # noqa: E402
from rigside.core.signal.overlaps import recover_overlaps  # noqa: E402
from rigside.core.signal.pipeline import detect, thresholds_sigma  # noqa: E402
from rigside.core.synthetic.synth import write_synth  # noqa: E402
from rigside.core.synthetic.truth import load_truth  # noqa: E402
from rigside.core.units.first_pass import first_pass  # noqa: E402


def overlapping(truth, group: np.ndarray, window: float) -> np.ndarray:
    """True spikes within ``window`` samples of a spike of another unit of the same group."""
    out = np.zeros(len(truth.sample), bool)
    for g in np.unique(group):
        i = np.flatnonzero(group == g)
        s, u = truth.sample[i], truth.unit[i]
        lo, hi = np.searchsorted(s, s - window), np.searchsorted(s, s + window, side="right")
        out[i] = [np.any(u[a:b] != u[k]) for k, (a, b) in enumerate(zip(lo, hi))]
    return out


def paired(truth, group, events, keep, tol) -> np.ndarray:
    """True spikes paired one-to-one with an event of their group (``keep`` rows) within ``tol``."""
    hit = np.zeros(len(truth.sample), bool)
    for g in np.unique(group):
        i, j = np.flatnonzero(group == g), np.flatnonzero(keep & (events.group == g))
        a, _ = match_times(truth.sample[i], events.sample[j], tol)
        hit[i[a]] = True
    return hit


def held_by_paired_unit(truth, events, assignments, tol) -> np.ndarray:
    """True spikes matched to an event of the sorted unit paired with their true unit."""
    sorted_rows = assignments >= 0
    true_units, units, shared = shared_spike_matrix(truth.sample, truth.unit, events.sample[sorted_rows],
                                                    assignments[sorted_rows], tol)
    rows, cols = linear_sum_assignment(-shared)
    out = np.zeros(len(truth.sample), bool)
    for r, c in zip(rows, cols):
        i = np.flatnonzero(truth.unit == true_units[r])
        j = np.flatnonzero(assignments == units[c])
        a, _ = match_times(truth.sample[i], events.sample[j], tol)
        out[i[a]] = True
    return out


def accuracy(folder: Path, seeds: int, seconds: float) -> None:
    print(f"1. overlapping spikes (within 1 ms of another unit of the group), demo {seconds:g} s x 16 ch")
    print("seed  overlapping  lost before  lost after  reduction  finds  finds true  in paired unit before/after")
    totals = np.zeros(4)
    for seed in range(seeds):
        path = folder / f"demo{seed}.bin"
        write_synth(path, seconds=seconds, channels=16, seed=seed)
        rec = open_recording(path)
        truth = load_truth(rec.truth_path())
        group = np.array([truth.unit_group[int(u)] for u in truth.unit])
        tol = 0.5e-3 * rec.rate_hz
        events, sorting = sort_recording(rec, Params())
        over = overlapping(truth, group, 1e-3 * rec.rate_hz)
        before = paired(truth, group, events, events.detected, tol)
        after = paired(truth, group, events, np.ones(len(events), bool), tol)
        lost_b, lost_a = int((~before[over]).sum()), int((~after[over]).sum())
        finds = int(events.recovered.sum())
        unit_b = held_by_paired_unit(truth, events, sorting.origin.assignments, tol)
        unit_a = held_by_paired_unit(truth, events, sorting.assignments, tol)
        totals += (lost_b, lost_a, finds, int(after.sum() - before.sum()))
        true_finds = int(after.sum() - before.sum())
        print(f"{seed:>4}  {int(over.sum()):>11}  {lost_b:>11}  {lost_a:>10}  {1 - lost_a / max(1, lost_b):>9.0%}  "
              f"{finds:>5}  {true_finds:>10}  {unit_b[over].mean():.3f} / {unit_a[over].mean():.3f}")
    print(f"all   lost {int(totals[0])} -> {int(totals[1])} ({1 - totals[1] / max(1, totals[0]):.0%} fewer); "
          f"{int(totals[3])} of {int(totals[2])} finds pair with a spike no detected event took")


def timing(folder: Path, channels: int, seconds: float) -> None:
    path = folder / "rig.bin"
    write_synth(path, seconds=seconds, channels=channels, seed=0)
    rec = open_recording(path)
    params = Params()
    t0 = time.perf_counter()
    table = detect(rec, params)
    events = table.subset(table.mask(threshold_sigma=thresholds_sigma(params, table.sigma_uv), include_artefacts=True))
    t1 = time.perf_counter()
    features = compute_features(rec, events, params)
    t2 = time.perf_counter()
    sorting = first_pass(events, features, params.cluster, workers=params.run.workers)
    t3 = time.perf_counter()
    found = recover_overlaps(rec, events, features, sorting.assignments, params)
    t4 = time.perf_counter()
    print(f"\n2. stages in process, demo {seconds:g} s x {channels} ch, {len(events):,} events, "
          f"{len(found.unit):,} recovered")
    for name, dt in (("detection (baseline)", t1 - t0), ("features", t2 - t1), ("first pass", t3 - t2),
                     ("overlap pass", t4 - t3)):
        print(f"   {name:<22} {dt:7.2f} s   {seconds / dt:7.0f}x real time   {dt / (t1 - t0):5.2f}x detection")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=5)
    ap.add_argument("--seconds", type=float, default=60.0)
    ap.add_argument("--channels", type=int, default=64)
    ap.add_argument("--rig-seconds", type=float, default=120.0)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        accuracy(Path(tmp), args.seeds, args.seconds)
        timing(Path(tmp), args.channels, args.rig_seconds)


if __name__ == "__main__":
    main()
