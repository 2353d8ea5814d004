"""First-pass agreement on synthetic 64-site probes, beside a plain mixture baseline.

Probe recordings of the synthetic probe scenario (:mod:`rigside.core.synthetic.probe_synth`, two
columns, 20 um pitch, one shank) are written to a temporary folder, detected and sorted by the real
sort (``rigside.core.runs.sort.sort_recording``) and scored per true unit by
:func:`rigside.core.synthetic.sorting_score.score_sorting` (Hungarian pairing, spikes matched within
0.5 ms). The baseline, measured in the same run on the same events: scikit-learn
``GaussianMixture`` (full covariances) on the PCA columns of each shank's features, its component
count chosen by BIC over 1..8 (``bench_sorting_truth.baseline_units``).

Columns: true units with >= 100 spikes at agreement >= 0.9, their median agreement, true units split
into two found units each holding more than 20% of their spikes (the issue's split count), found
units, and the first pass's time against the baseline's.

    python bench/bench_probe_sorting.py [--seeds 3] [--seconds 30]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

from bench_sorting_truth import StageClock, baseline_units  # noqa: E402

from rigside.core.io.recording import open_recording  # noqa: E402
from rigside.core.params import Params  # noqa: E402
from rigside.core.runs.sort import sort_recording  # noqa: E402
from rigside.core.synthetic.probe_synth import write_probe_synth  # noqa: E402
from rigside.core.synthetic.sorting_score import score_sorting, split_true_units  # noqa: E402
from rigside.core.synthetic.truth import load_truth  # noqa: E402

MIN_SPIKES = 100
GOOD = 0.9


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=3, help="probe seeds (0..N-1)")
    ap.add_argument("--seconds", type=float, default=30.0, help="length of every recording")
    ap.add_argument("--sites", type=int, default=64)
    args = ap.parse_args()
    print(f"{'seed':>4} {'method':<10} {'>=0.9':>7} {'agree':>6} {'split':>5} {'units':>7} {'time s':>7}")
    totals: dict[str, list[int]] = {}
    with tempfile.TemporaryDirectory() as tmp:
        for seed in range(args.seeds):
            path = Path(tmp) / f"probe{seed}.bin"
            write_probe_synth(path, seconds=args.seconds, sites=args.sites, seed=seed)
            rec = open_recording(path)
            truth = load_truth(rec.truth_path())
            clock = StageClock()
            events, sorting = sort_recording(rec, Params(), progress=clock)
            _, ours_s, _ = clock.stages(time.perf_counter())
            t0 = time.perf_counter()
            base = baseline_units(events, sorting.data.features, sorting.data.feature_names)
            base_s = time.perf_counter() - t0
            for method, units, secs in (("first pass", sorting.assignments, ours_s), ("baseline", base, base_s)):
                s = score_sorting(truth.sample, truth.unit, events.sample, units, events.rate_hz)
                split = split_true_units(truth.sample, truth.unit, events.sample, units, events.rate_hz,
                                         min_spikes=MIN_SPIKES)
                good, big = s.share_at(GOOD, MIN_SPIKES)
                med = float(np.median(s.agreement[s.true_spikes >= MIN_SPIKES]))
                print(f"{seed:>4} {method:<10} {good:>3}/{big:<3} {med:6.3f} {len(split):>5} "
                      f"{s.found_units:>3}/{len(s.true_ids):<3} {secs:7.2f}", flush=True)
                t = totals.setdefault(method, [0, 0, 0, 0])
                t[0] += good
                t[1] += big
                t[2] += len(split)
                t[3] += int(round(secs * 1000))
    print()
    for method, (good, big, split, ms) in totals.items():
        print(f"  {method:<10} {good}/{big} = {good / max(big, 1):.0%} at >= {GOOD}; split units {split}; "
              f"time {ms / 1000:.1f} s")
    ours, base = totals.get("first pass"), totals.get("baseline")
    if ours and base and base[0]:
        print(f"  ratio first pass / baseline of units at >= {GOOD}: {ours[0] / base[0]:.2f}; "
              f"time ratio {ours[3] / max(base[3], 1):.2f}")


if __name__ == "__main__":
    main()
