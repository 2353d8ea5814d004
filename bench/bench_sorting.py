"""Benchmark of first-pass clustering and of single curation steps.

Prints, from one run:
1. first-pass clustering of N events (default 10^6) across 16 channel groups (invented
   Gaussian clusters, 6 features like 3 PCs + 3 shape measures), against a baseline measured
   in the same run: the same BIC search fitted on all events of one group without subsampling,
   on a quarter group, scaled linearly to the full size (a lower bound of its real cost);
   and, with --detect, against detection of a generated 16-channel recording scaled to the
   same number of events;
2. one polygon split and one merge on a unit of 10^5 events (in the 10^6-event sorting):
   time of do, undo and redo, and the memory one undo step keeps, against a full-copy undo
   (save the whole assignment array before each step, restore it on undo);
3. saving (atomic, with backup), autosaving and loading (checksum verified) a session of that
   sorting, against writing the same arrays with numpy.save (no checksum, not atomic).

    python bench/bench_sorting.py [--events 1000000] [--detect]
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

from rigside.core.units.clustering import ClusterParams, cluster_features, first_pass_assignments  # noqa: E402
from rigside.core.units.history import UndoStack  # noqa: E402
from rigside.core.units.operations import MergeUnits, ReclusterUnit, SplitByPolygon  # noqa: E402
from rigside.core.units.sorting import AXIS_TIME, Sorting, SortingData, Unit  # noqa: E402

GROUPS = 16
D = 6


def invented(n: int, seed: int = 0):
    """n events over 16 groups (group 0 holds a fifth, so it can hold a unit of 10^5 events),
    3-6 Gaussian clusters per group, times over one hour."""
    rng = np.random.default_rng(seed)
    share = np.r_[0.2, np.full(GROUPS - 1, 0.8 / (GROUPS - 1))]
    group = np.sort(rng.choice(GROUPS, n, p=share)).astype(np.int32)
    per_group = rng.integers(3, 7, GROUPS)
    lab = (rng.random(n) * per_group[group]).astype(np.int64)
    centers = rng.normal(0, 6, (GROUPS, 6, D))
    x = (centers[group, lab] + rng.normal(0, 1, (n, D))).astype(np.float32)
    amp = -(40 + 10 * lab + rng.normal(0, 3, n)).astype(np.float32)
    time_s = np.sort(rng.uniform(0, 3600, n))
    return SortingData(x, [f"f{i}" for i in range(D)], time_s, amp, group, np.zeros(n, bool))


def timed(fn, *args, **kw):
    t = time.perf_counter()
    out = fn(*args, **kw)
    return time.perf_counter() - t, out


def bench_first_pass(data: SortingData, params: ClusterParams) -> float:
    wall, (assign, units) = timed(first_pass_assignments, data.group, data.artefact, data.features,
                                  data.amplitude_uv, params)
    n = len(data)
    print(f"first pass: {n} events, {GROUPS} groups -> {len(units)} units in {wall:.2f} s "
          f"({n / wall / 1e3:.0f} k events/s; fit on <= {params.fit_events} events per group)")
    rows = np.flatnonzero(data.group == 1)
    quarter = rows[: len(rows) // 4]
    full_fit = ClusterParams(**{**params.to_dict(), "fit_events": len(quarter)})
    base, _ = timed(cluster_features, data.features[quarter], full_fit, 1)
    scaled = base * n / len(quarter)
    print(f"baseline, no subsampling: {len(quarter)} events (a quarter group) in {base:.2f} s -> "
          f"scaled to {n} events: {scaled:.1f} s")
    print(f"ratio baseline / first pass: {scaled / wall:.1f}x")
    return wall


def bench_detect(n_events: int, cluster_wall: float) -> None:
    from rigside.core.io.recording import open_recording
    from rigside.core.params import Params
    from rigside.core.signal.pipeline import detect
    from rigside.core.synthetic.synth import write_synth

    work = Path(tempfile.mkdtemp(prefix="rigside-bench-sort-"))
    path = work / "demo.bin"
    write_synth(path, seconds=60.0, channels=16, seed=1)
    rec = open_recording(path)
    params = Params()
    wall, events = timed(detect, rec, params)
    n = int(events.mask(threshold_sigma=params.detect.threshold_sigma).sum())
    scaled = wall * n_events / max(n, 1)
    print(f"detection: 60 s, 16 channels, {n} events in {wall:.2f} s -> scaled to {n_events} events: "
          f"{scaled:.1f} s ({n_events / max(n, 1):.0f} min of such a recording)")
    print(f"ratio first pass / detection for the same events: {cluster_wall / scaled:.2f}")


def make_sorting(data: SortingData, big: int) -> Sorting:
    """Group 0 split into unit 1 (the first ``big`` events of the group) and unit 2; one unit per other group."""
    assign = np.empty(len(data), dtype=np.int32)
    units = {}
    for g in range(GROUPS):
        rows = np.flatnonzero(data.group == g)
        assign[rows] = 3 + g
        units[3 + g] = Unit(g)
    g0 = np.flatnonzero(data.group == 0)
    assign[g0[:big]] = 1
    assign[g0[big:]] = 2
    units.update({1: Unit(0), 2: Unit(0)})
    return Sorting(data, assign, units, next_id=3 + GROUPS)


def step_times(sorting: Sorting, op) -> tuple[float, float, float, int]:
    stack = UndoStack(sorting)
    t_do, _ = timed(stack.push, op)
    t_undo, _ = timed(stack.undo)
    t_redo, _ = timed(stack.redo)
    d = op._delta
    kept = d.index.nbytes + d.before.nbytes + d.after.nbytes
    stack.undo()
    return t_do, t_undo, t_redo, kept


def full_copy_step(sorting: Sorting, op) -> tuple[float, float, int]:
    """Baseline undo: copy the whole assignment array before the step, write it back on undo."""
    t = time.perf_counter()
    saved = sorting.assignments.copy()
    saved_units = sorting.units
    op.do(sorting)
    t_do = time.perf_counter() - t
    t = time.perf_counter()
    sorting._assign[:] = saved
    sorting._units = saved_units
    sorting._members.clear()
    t_undo = time.perf_counter() - t
    return t_do, t_undo, saved.nbytes


def bench_steps(data: SortingData, big: int) -> None:
    s = make_sorting(data, big)
    idx = s.events_of(1)
    t = data.axis_values(AXIS_TIME, idx)
    f0 = data.axis_values("feature:f0", idx)
    lo, hi = np.percentile(f0, [30, 70])
    poly = [[lo, t.min() - 1], [hi, t.min() - 1], [hi, t.max() + 1], [lo, t.max() + 1]]
    print(f"curation steps on a unit of {len(idx)} events (sorting of {len(data)} events):")
    for name, make in (("split by polygon", lambda: SplitByPolygon(1, "feature:f0", AXIS_TIME, poly)),
                       ("merge", lambda: MergeUnits([1, 2]))):
        step_times(s, make())  # warm caches
        t_do, t_undo, t_redo, kept = step_times(s, make())
        b_do, b_undo, b_kept = full_copy_step(s, make())
        print(f"  {name:17s} do {1e3 * t_do:6.1f} ms, undo {1e3 * t_undo:6.1f} ms, redo {1e3 * t_redo:6.1f} ms;"
              f" undo memory {kept / 1e6:5.2f} MB")
        print(f"  {'full-copy undo':17s} do {1e3 * b_do:6.1f} ms, undo {1e3 * b_undo:6.1f} ms;"
              f"             undo memory {b_kept / 1e6:5.2f} MB")
        print(f"  ratios full-copy / ours: undo memory {b_kept / kept:.1f}x, "
              f"undo time {b_undo / t_undo:.2f}x, do time {b_do / t_do:.2f}x")
    op = ReclusterUnit(1, k=3)
    t_prep, _ = timed(op.prepare, s)
    t_do, t_undo, t_redo, kept = step_times(s, op)
    print(f"  recluster into 3   prepare (clustering, worker thread) {1e3 * t_prep:6.1f} ms; then do "
          f"{1e3 * t_do:6.1f} ms, undo {1e3 * t_undo:6.1f} ms, redo {1e3 * t_redo:6.1f} ms")


def bench_session(data: SortingData, sorting: Sorting) -> None:
    from rigside.core.events import EventTable
    from rigside.core.params import Params
    from rigside.core.units.session import RecordingRef, Session, load_session, save_autosave, save_session

    n = len(data)
    rate = 30000.0
    events = EventTable(sample=np.round(data.time_s * rate).astype(np.int64), channel=data.group,
                        group=data.group, amplitude_uv=data.amplitude_uv, amplitude_sigma=np.full(n, 6.0),
                        artefact=data.artefact, rate_hz=rate, n_samples=int(3601 * rate),
                        sigma_uv=np.ones(GROUPS), floor_sigma=4.0)
    work = Path(tempfile.mkdtemp(prefix="rigside-bench-session-"))
    session = Session(RecordingRef(str(work / "none.bin"), 0, "0:0", {}), Params(), events, sorting)
    path = work / "s.h5"
    save_session(path, session)
    t_save, _ = timed(save_session, path, session)
    t_auto, _ = timed(save_autosave, path, session)
    t_load, _ = timed(load_session, path, check_recording=False)

    def plain() -> None:
        for name, a in (("f", data.features), ("a", sorting.assignments), ("s", events.sample),
                        ("m", events.amplitude_uv), ("g", events.group)):
            np.save(work / f"{name}.npy", a)

    t_plain, _ = timed(plain)
    size = path.stat().st_size / 1e6
    print(f"session of {n} events ({size:.0f} MB): save {t_save:.2f} s (with backup), autosave {t_auto:.2f} s, "
          f"load {t_load:.2f} s; plain numpy.save of the main arrays {t_plain:.2f} s")
    print(f"ratio save / plain numpy.save: {t_save / t_plain:.1f}x")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--events", type=int, default=1_000_000)
    ap.add_argument("--unit", type=int, default=100_000, help="events in the unit split and merged")
    ap.add_argument("--detect", action="store_true", help="also time detection on a generated recording")
    a = ap.parse_args()
    data = invented(a.events)
    wall = bench_first_pass(data, ClusterParams(seed=1))
    if a.detect:
        bench_detect(a.events, wall)
    big = min(a.unit, int(np.sum(data.group == 0)) - 1)
    bench_steps(data, big)
    bench_session(data, make_sorting(data, big))


if __name__ == "__main__":
    main()
