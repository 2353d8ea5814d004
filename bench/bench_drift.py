"""Benchmark of the probe additions to the unit table and of the drift view's image.

Invented data: 50 units of a probe, 4 x 10^5 events over 1000 s, each unit drifting along the
probe. Every figure is measured in this process on the same data and printed with a ratio:

- the unit table with the position and drift columns against the same table without them (the
  window recomputes it after every curation step);
- the drift per unit (Theil–Sen on at most 300 events spread over the train) against
  ``scipy.stats.theilslopes`` on a unit's whole train (the cost a subsample saves);
- the depth image of 10^6 events (largest amplitude per cell) against
  ``scipy.stats.binned_statistic_2d`` with statistic "max" on the same grid.

Run: python bench/bench_drift.py [--events N] [--units N]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from rigside.core.quality.depth_image import depth_image  # noqa: E402
from rigside.core.quality.unit_position import position_drift  # noqa: E402
from rigside.core.quality.unit_table import unit_metrics_table  # noqa: E402

DURATION, SIGMA_UV, THRESHOLD, SITES = 1000.0, 12.0, 4.5, 64


def make_data(n_events: int, n_units: int, seed: int = 0) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    per = n_events // n_units
    parts = {k: [] for k in ("t", "u", "c", "a", "x", "y")}
    for u in range(n_units):
        t = np.sort(rng.uniform(0, DURATION, per))
        y0, slope = rng.uniform(0, 620), rng.uniform(-2, 2)          # um and um per minute
        parts["t"].append(t)
        parts["u"].append(np.full(per, u))
        parts["c"].append(np.full(per, u % SITES))
        parts["a"].append(-np.maximum(rng.normal(90.0, 18.0, per), THRESHOLD * SIGMA_UV))
        parts["x"].append(rng.normal(10.0, 3.0, per))
        parts["y"].append(y0 + slope * t / 60.0 + rng.normal(0, 3.0, per))
    order = np.argsort(np.concatenate(parts["t"]), kind="stable")
    d = {k: np.concatenate(v)[order] for k, v in parts.items()}
    d["s"] = np.abs(d["a"]) / SIGMA_UV
    return d


def table(d, positions: bool):
    sigma = np.full(SITES, SIGMA_UV)
    xy = np.column_stack([d["x"], d["y"]]) if positions else None
    return unit_metrics_table(d["t"], d["u"], DURATION, d["a"], d["s"], d["c"], sigma, THRESHOLD, None,
                              event_positions=xy)


def timed(fn, repeat: int = 3) -> float:
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--events", type=int, default=400_000)
    ap.add_argument("--units", type=int, default=50)
    args = ap.parse_args(argv)
    d = make_data(args.events, args.units)
    table(d, True)                                   # imports and compiled steps before timing
    plain, probe = timed(lambda: table(d, False)), timed(lambda: table(d, True))
    print(f"unit table, {args.units} units, {args.events:,} events: without positions {plain:.3f} s, "
          f"with position and drift {probe:.3f} s (ratio {probe / plain:.2f}x)")

    mine = d["u"] == 0
    t, y = d["t"][mine], d["y"][mine]
    ours = timed(lambda: position_drift(t, y))
    full = timed(lambda: stats.theilslopes(y, t / 60.0), repeat=1)
    print(f"drift of one unit ({len(t):,} events): ours {ours * 1e3:.1f} ms, theilslopes on all events "
          f"{full * 1e3:.1f} ms (ratio {full / ours:.1f}x); slopes {position_drift(t, y).value:.3f} vs "
          f"{stats.theilslopes(y, t / 60.0).slope:.3f} um/min")

    rng = np.random.default_rng(1)
    n = 1_000_000
    tt, dd, aa = np.sort(rng.uniform(0, 3600, n)), rng.uniform(0, 3840, n), rng.normal(-60, 20, n)
    grid = (1000, 800)
    img = timed(lambda: depth_image(tt, dd, aa, (0.0, 3600.0), (0.0, 3840.0), *grid))
    ref = timed(lambda: stats.binned_statistic_2d(tt, dd, np.abs(aa), "max", bins=list(grid),
                                                  range=[[0, 3600], [0, 3840]]), repeat=1)
    print(f"depth image, {n:,} events on {grid[0]} x {grid[1]} cells: ours {img * 1e3:.1f} ms, "
          f"scipy binned_statistic_2d (max) {ref * 1e3:.1f} ms (ratio {ref / img:.1f}x)")


if __name__ == "__main__":
    main()
