"""Benchmark of the unit quality table against a straightforward numpy/scipy version.

Invented data: 100 units, 10^6 events in 16 channel groups of 4 channels, 12 features
(3 components x 4 channels) per event. Both versions run in this process on the same data;
the script prints wall times and the ratio baseline / ours, for a full refresh and for one unit.
Targets of issue 5: full refresh under 2 s, one unit under 100 ms.

Run: python bench/bench_metrics.py [--events N] [--units N]
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np
from scipy import optimize, stats
from scipy.spatial.distance import cdist

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from rigside.core.quality.correlograms import autocorrelogram  # noqa: E402
from rigside.core.quality.unit_table import unit_metrics_table  # noqa: E402

DURATION = 1000.0
N_GROUPS = 16
N_FEATURES = 12
SIGMA_UV = 12.0
THRESHOLD = 4.5


def make_data(n_events: int, n_units: int, seed: int = 0) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    per = n_events // n_units
    parts = {k: [] for k in ("t", "u", "g", "c", "a", "f")}
    for u in range(n_units):
        g = u % N_GROUPS
        t = np.sort(rng.uniform(0, DURATION, per))
        parts["t"].append(t)
        parts["u"].append(np.full(per, u))
        parts["g"].append(np.full(per, g))
        parts["c"].append(np.full(per, 4 * g + u % 4))
        mag = rng.normal(90.0, 18.0, per)
        parts["a"].append(-np.maximum(mag, THRESHOLD * SIGMA_UV + rng.uniform(0, 3, per)))
        parts["f"].append(rng.normal(rng.normal(0, 4, N_FEATURES), 1.0, (per, N_FEATURES)))
    order = np.argsort(np.concatenate(parts["t"]), kind="stable")
    d = {k: np.concatenate(v)[order] for k, v in parts.items()}
    d["f"] = d["f"].astype(np.float32)
    d["s"] = np.abs(d["a"]) / SIGMA_UV
    return d


def ours(d, only_units=None):
    sigma = np.full(4 * N_GROUPS, SIGMA_UV)
    return unit_metrics_table(d["t"], d["u"], DURATION, d["a"], d["s"], d["c"], sigma, THRESHOLD,
                              d["f"], d["g"], only_units=only_units)


def baseline_unit(d, u, clock):
    """Straightforward per-unit code: boolean masks, cdist, chi2.sf, scipy truncnorm fit."""
    t0 = time.perf_counter()
    mine = d["u"] == u
    t = d["t"][mine]
    isi = np.diff(t)
    r = np.count_nonzero(isi < 0.0015)
    n = len(t)
    x = r * DURATION / (0.0015 * n * n)
    contamination = 0.5 - math.sqrt(0.25 - x / 2) if x <= 0.5 else math.nan
    cv = isi.std(ddof=1) / isi.mean()
    presence = np.count_nonzero(np.histogram(t, bins=16, range=(0, DURATION))[0]) / 16
    slope = np.polyfit(t / 60.0, d["a"][mine], 1)[0]
    snr = np.abs(d["a"][mine]).mean() / SIGMA_UV
    t1 = time.perf_counter()
    g = np.bincount(d["g"][mine]).argmax()
    in_group = d["g"] == g
    x_g = d["f"][in_group].astype(np.float64)
    inside = mine[in_group]
    cov = np.cov(x_g[inside], rowvar=False)
    d2 = cdist(x_g[~inside], x_g[inside].mean(axis=0)[None], "mahalanobis",
               VI=np.linalg.inv(cov))[:, 0] ** 2
    iso = np.sort(d2)[inside.sum() - 1]
    lr = stats.chi2.sf(d2, x_g.shape[1]).sum() / inside.sum()
    t2 = time.perf_counter()
    amp = d["s"][mine]

    def nll(p):
        sd = math.exp(p[1])
        return -stats.truncnorm.logpdf(amp, (THRESHOLD - p[0]) / sd, np.inf, loc=p[0], scale=sd).sum()

    fit = optimize.minimize(nll, [amp.mean(), math.log(amp.std())], method="Nelder-Mead")
    missed = stats.norm.cdf((THRESHOLD - fit.x[0]) / math.exp(fit.x[1]))
    t3 = time.perf_counter()
    clock["train"] += t1 - t0
    clock["separation"] += t2 - t1
    clock["amplitude fit"] += t3 - t2
    return contamination, cv, presence, slope, snr, iso, lr, missed


def best_of(f, k=3):
    times = []
    for _ in range(k):
        t0 = time.perf_counter()
        f()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--events", type=int, default=1_000_000)
    ap.add_argument("--units", type=int, default=100)
    args = ap.parse_args()
    d = make_data(args.events, args.units)
    print(f"{len(d['t'])} events, {args.units} units, {N_GROUPS} groups, {N_FEATURES} features")

    t0 = time.perf_counter()
    table = ours(d)
    print(f"first call (includes loading compiled kernels): {time.perf_counter() - t0:.3f} s")
    full = best_of(lambda: ours(d))
    one = best_of(lambda: ours(d, only_units=[7]), k=5)

    clock = {"train": 0.0, "separation": 0.0, "amplitude fit": 0.0}
    t0 = time.perf_counter()
    ref = [baseline_unit(d, u, clock) for u in range(args.units)]
    base_full = time.perf_counter() - t0
    t0 = time.perf_counter()
    baseline_unit(d, 7, {k: 0.0 for k in clock})
    base_one = time.perf_counter() - t0

    iso_diff = np.nanmax(np.abs(table["isolation_distance"] - [r[5] for r in ref]) / [r[5] for r in ref])
    lr_diff = np.nanmax(np.abs(table["l_ratio"] - [r[6] for r in ref]))
    miss_diff = np.nanmax(np.abs(table["missed_fraction"] - [r[7] for r in ref]))
    print(f"agreement with baseline: isolation distance rel {iso_diff:.1e}, L-ratio abs {lr_diff:.1e}, "
          f"missed fraction abs {miss_diff:.1e}")
    print("baseline parts: " + ", ".join(f"{k} {v:.2f} s" for k, v in clock.items()))
    print(f"full refresh: ours {full:.3f} s, baseline {base_full:.2f} s, ratio {base_full / full:.1f}x "
          f"(target < 2 s)")
    print(f"one unit:     ours {one * 1e3:.1f} ms, baseline {base_one * 1e3:.1f} ms, "
          f"ratio {base_one / one:.1f}x (target < 100 ms)")

    spikes = d["t"][d["u"] == 7]
    acg = best_of(lambda: autocorrelogram(spikes, 0.001, 0.05))
    base_acg = best_of(lambda: baseline_acg(spikes, 0.001, 0.05))
    print(f"autocorrelogram ({len(spikes)} spikes, +-50 ms): ours {acg * 1e3:.2f} ms, numpy "
          f"searchsorted pairs {base_acg * 1e3:.2f} ms, ratio {base_acg / acg:.1f}x")


def baseline_acg(t, bin_s, window_s):
    """Vectorised numpy: pair every spike with its neighbours inside the window, histogram."""
    lo = np.searchsorted(t, t - window_s, "left")
    hi = np.searchsorted(t, t + window_s, "left")
    counts = hi - lo
    i = np.repeat(np.arange(len(t)), counts)
    j = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts) + np.repeat(lo, counts)
    keep = i != j
    lags = t[j[keep]] - t[i[keep]]
    n_half = int(round(window_s / bin_s))
    return np.histogram(lags, bins=2 * n_half, range=(-window_s, window_s))[0]


if __name__ == "__main__":
    main()
