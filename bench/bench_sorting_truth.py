"""Sorting accuracy against ground truth: the first pass beside a plain mixture baseline.

Synthetic recordings of the demo scenario (five seeds, 60 s, 12 true units each) and harder
variants of it (lower SNR, higher rates, crowded bundles with more bursting and look-alike
units, near-coincident spikes, strong baseline drift) are written to a temporary folder,
detected and sorted with the real first pass (``rigside.core.runs.sort.sort_recording``), and
scored per true unit by :func:`rigside.core.synthetic.sorting_score.score_sorting` (Hungarian
pairing, spikes matched within 0.5 ms). The baseline, measured in the same run on the same
events: scikit-learn ``GaussianMixture`` (full covariances) on the PCA columns of each group's
features, its component count chosen by BIC over 1..8, no merging, no cleaning.

Columns: agreement >= 0.9 among true units with >= 100 spikes, median agreement, precision and
recall over those units, found units against true units, the counts of false units,
fragments, over-split true units and merged found units, and times: ``time s`` is the first pass
alone (clustering, fragments, split test; for the baseline its mixture fits), ``detect s`` the
detection and features before it and ``overlap s`` the overlap pass after it (both the same
events for the two methods, so shown on the first pass's row only; the stage boundaries are
taken from the sort's progress messages). The issue's targets on the demo seeds:
>= 90% at agreement >= 0.9, at most one false or fragment unit per recording, unit count within
+-2 of the truth.

    python bench/bench_sorting_truth.py [--seeds 5] [--seconds 60] [--quick]
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

from rigside.core.io.recording import open_recording  # noqa: E402
from rigside.core.params import Params  # noqa: E402
from rigside.core.runs.sort import sort_recording  # noqa: E402
from rigside.core.synthetic.settings import SynthSettings  # noqa: E402
from rigside.core.synthetic.sorting_score import SortingScore, score_sorting  # noqa: E402
from rigside.core.synthetic.synth import write_practice  # noqa: E402
from rigside.core.synthetic.truth import load_truth  # noqa: E402

MIN_SPIKES = 100
GOOD = 0.9
VARIANTS = {
    "low SNR": {"snr": (4.0, 9.0)},
    "high rates": {"rates_hz": (5.0, 80.0)},
    "crowded": {"units": 20},
    "overlaps": {"overlap_fraction": 0.1},
    "drift": {"drift_uv": 400.0},
}


def baseline_units(events, features, names) -> np.ndarray:
    """GaussianMixture + BIC on each group's PCA columns (no merging, no cleaning)."""
    from sklearn.mixture import GaussianMixture

    pcs = [i for i, n in enumerate(names) if n.startswith("PC")]
    out = np.full(len(events), -1, dtype=np.int64)
    next_id = 0
    for g in np.unique(events.group):
        rows = np.flatnonzero((events.group == g) & ~events.artefact)
        if not len(rows):
            continue
        x = features[rows][:, pcs].astype(np.float64)
        x = (x - x.mean(axis=0)) / np.maximum(x.std(axis=0), 1e-12)
        fits = [GaussianMixture(k, covariance_type="full", random_state=0).fit(x)
                for k in range(1, min(8, len(rows) // 10) + 1)]
        best = min(fits, key=lambda gm: gm.bic(x))
        labels = np.unique(best.predict(x), return_inverse=True)[1]
        out[rows] = next_id + labels
        next_id += int(labels.max()) + 1
    return out


STAGE_ENDS = ("features ready", "clustering done")
"""Progress messages of ``sort_recording`` that end detection with features, and the first pass."""


class StageClock:
    """A progress callback keeping when each message of :data:`STAGE_ENDS` first arrived."""

    def __init__(self) -> None:
        self.start = time.perf_counter()
        self.at: dict[str, float] = {}

    def __call__(self, fraction: float, message: str) -> None:
        if message in STAGE_ENDS and message not in self.at:
            self.at[message] = time.perf_counter()

    def stages(self, end: float) -> tuple[float, float, float]:
        """Seconds of detection with features, of the first pass and of the overlap pass."""
        features, clustered = (self.at[m] for m in STAGE_ENDS)
        return features - self.start, clustered - features, end - clustered


def row(name: str, method: str, s: SortingScore, true_units: int, seconds: float, detect_s: str = "",
        overlap_s: str = "") -> str:
    good, big = s.share_at(GOOD, MIN_SPIKES)
    big_mask = s.true_spikes >= MIN_SPIKES
    med = (lambda a: float(np.median(a[big_mask])) if big_mask.any() else float("nan"))
    return (f"{name:<12} {method:<10} {good:>3}/{big:<3} {med(s.agreement):6.3f} {med(s.precision):6.3f} "
            f"{med(s.recall):6.3f} {s.found_units:>3}/{true_units:<3} {s.false_units:>5} {s.fragments:>5} "
            f"{s.over_split:>5} {s.merged:>6} {seconds:6.1f} {detect_s:>8} {overlap_s:>9}")


def run_one(folder: Path, name: str, settings: SynthSettings, totals: dict) -> None:
    path = folder / f"{name.replace(' ', '_')}.bin"
    write_practice(path, settings)
    rec = open_recording(path)
    truth = load_truth(rec.truth_path())
    params = Params()
    clock = StageClock()
    events, sorting = sort_recording(rec, params, progress=clock)
    detect_s, ours_s, overlap_s = clock.stages(time.perf_counter())
    t0 = time.perf_counter()
    base = baseline_units(events, sorting.data.features, sorting.data.feature_names)
    base_s = time.perf_counter() - t0
    n_true = len(np.unique(truth.unit))
    for method, units, secs in (("first pass", sorting.assignments, ours_s), ("baseline", base, base_s)):
        s = score_sorting(truth.sample, truth.unit, events.sample, units, events.rate_hz)
        extra = (f"{detect_s:.1f}", f"{overlap_s:.1f}") if method == "first pass" else ("", "")
        print(row(name, method, s, n_true, secs, *extra), flush=True)
        if name.startswith("demo"):
            t = totals.setdefault(method, {"good": 0, "big": 0, "bad_units": [], "count_off": []})
            good, big = s.share_at(GOOD, MIN_SPIKES)
            t["good"] += good
            t["big"] += big
            t["bad_units"].append(s.false_units + s.fragments)
            t["count_off"].append(s.found_units - n_true)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=5, help="demo seeds (0..N-1)")
    ap.add_argument("--seconds", type=float, default=60.0, help="length of every recording")
    ap.add_argument("--quick", action="store_true", help="demo seeds only, no harder variants")
    args = ap.parse_args()
    print(f"{'recording':<12} {'method':<10} {'>=0.9':>7} {'agree':>6} {'prec':>6} {'recall':>6} "
          f"{'units':>7} {'false':>5} {'frag':>5} {'split':>5} {'merged':>6} {'time s':>6} {'detect s':>8} "
          f"{'overlap s':>9}")
    totals: dict = {}
    with tempfile.TemporaryDirectory() as tmp:
        for seed in range(args.seeds):
            run_one(Path(tmp), f"demo {seed}", SynthSettings(seconds=args.seconds, seed=seed), totals)
        if not args.quick:
            for name, extra in VARIANTS.items():
                run_one(Path(tmp), name, SynthSettings(seconds=args.seconds, seed=0, **extra), totals)
    print(f"\nover the {args.seeds} demo seeds (targets: >= 90% of units with >= {MIN_SPIKES} spikes at "
          f">= {GOOD}; <= 1 false or fragment unit per recording; unit count within +-2):")
    for method, t in totals.items():
        print(f"  {method:<10} {t['good']}/{t['big']} = {t['good'] / max(t['big'], 1):.0%} at >= {GOOD}; "
              f"false+fragment per recording {t['bad_units']}; found - true {t['count_off']}")
    ours, base = totals.get("first pass"), totals.get("baseline")
    if ours and base and base["good"]:
        print(f"  ratio first pass / baseline of units at >= {GOOD}: {ours['good'] / base['good']:.2f}")


if __name__ == "__main__":
    main()
