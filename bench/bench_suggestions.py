"""Benchmark of the curation suggestions against a straightforward version, on invented units.

Invented data: 50 units and 4 x 10^5 events over 600 s, 8 PCs per event, either in 10 bundles of
5 units or in one shank of 50 units (every pair a candidate). Ours: :func:`suggest` (features only;
mean waveforms are cut once per unit, 200 events each, and not timed here). Baseline, in the same
process on the same data: every pair of a group weighed with the compiled cross-correlogram
(0.5 ms bins to 25 ms) and the Bhattacharyya coefficient of Gaussians fitted to all of each unit's
events, and every unit's one- against two-part mixture fitted to all its events. Prints wall
times and the ratio baseline / ours.

Run: python bench/bench_suggestions.py [--events N] [--units N]
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from rigside.core.events import EventTable  # noqa: E402
from rigside.core.params import MetricParams  # noqa: E402
from rigside.core.quality.correlograms import crosscorrelogram  # noqa: E402
from rigside.core.quality.pair_evidence import bhattacharyya_coefficient, gaussian_fit  # noqa: E402
from rigside.core.quality.suggestions import suggest  # noqa: E402
from rigside.core.signal.chunk_pool import single_threaded_pools  # noqa: E402
from rigside.core.units.sorting import Sorting, SortingData, Unit  # noqa: E402

SECONDS, RATE_HZ, N_PCS = 600.0, 30000.0, 8


def make_sorting(n_events: int, n_units: int, n_groups: int, seed: int = 0) -> tuple[EventTable, Sorting]:
    rng = np.random.default_rng(seed)
    per = n_events // n_units
    t, u, x = [], [], []
    for k in range(n_units):
        isi = 0.002 + rng.exponential(SECONDS / per, per)
        t.append(np.cumsum(isi) % SECONDS)
        u.append(np.full(per, k + 1))
        x.append(rng.normal(rng.normal(0, 3, N_PCS), 1.0, (per, N_PCS)))
    order = np.argsort(np.concatenate(t), kind="stable")
    t, u, x = np.concatenate(t)[order], np.concatenate(u)[order], np.vstack(x)[order]
    group = ((u - 1) % n_groups).astype(np.int32)
    n = len(t)
    events = EventTable(sample=np.round(t * RATE_HZ).astype(np.int64), channel=4 * group + (u % 4), group=group,
                        amplitude_uv=np.full(n, -80.0), amplitude_sigma=np.full(n, 8.0), artefact=np.zeros(n, bool),
                        rate_hz=RATE_HZ, n_samples=int(SECONDS * RATE_HZ), sigma_uv=np.full(4 * n_groups, 10.0),
                        floor_sigma=4.0)
    data = SortingData.from_events(events, x.astype(np.float32), [f"PC{i + 1}" for i in range(N_PCS)])
    units = {k + 1: Unit(group=int(k % n_groups)) for k in range(n_units)}
    return events, Sorting(data, u.astype(np.int32), units, n_units + 1)


def baseline(sorting: Sorting) -> int:
    from sklearn.mixture import GaussianMixture

    x, t = sorting.data.features.astype(np.float64), sorting.data.time_s
    groups: dict[int, list[int]] = {}
    for u in sorting.unit_ids():
        groups.setdefault(sorting.unit(u).group, []).append(u)
    fits = {u: gaussian_fit(x[sorting.events_of(u)]) for u in sorting.unit_ids()}
    n = 0
    with single_threaded_pools(), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for units in groups.values():
            for i, a in enumerate(units):
                for b in units[i + 1:]:
                    crosscorrelogram(t[sorting.events_of(a)], t[sorting.events_of(b)], 0.0005, 0.025)
                    bhattacharyya_coefficient(*fits[a], *fits[b])
                    n += 1
        for u in sorting.unit_ids():
            xu = x[sorting.events_of(u)]
            GaussianMixture(1, covariance_type="full").fit(xu)
            GaussianMixture(2, covariance_type="full").fit(xu)
    return n


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--events", type=int, default=400_000)
    ap.add_argument("--units", type=int, default=50)
    args = ap.parse_args()
    metric = MetricParams(refractory_ms=1.5, censored_ms=1.0)
    suggest(*make_sorting(20_000, 10, 2), metric)           # imports and compiled kernels out of the timing
    for name, n_groups in (("10 bundles", 10), ("one shank", 1)):
        events, sorting = make_sorting(args.events, args.units, n_groups)
        t0 = time.perf_counter()
        found = suggest(events, sorting, metric)
        ours_s = time.perf_counter() - t0
        t0 = time.perf_counter()
        pairs = baseline(sorting)
        base_s = time.perf_counter() - t0
        print(f"{name}: {args.units} units, {len(events):,} events, {pairs} pairs in groups; "
              f"suggest {ours_s:.2f} s ({len(found)} suggestions), baseline {base_s:.2f} s, "
              f"ratio baseline/ours {base_s / ours_s:.1f}")


if __name__ == "__main__":
    main()
