"""Benchmark of session files at rig scale: first save, later save, autosave after one curation
step, and load, beside a plain baseline measured in the same run on the same arrays.

Invented data, held in memory: ``--events`` events (default 10^7) on 64 channels in 16 groups
of 4 over one hour at 30 kHz, ``--features`` float32 features per event, ``--units`` units.
The recording is a small stand-in file (load checks its size and fingerprint only).

- rigside: :func:`save_session` (static part and state part on the first save; the state part
  only afterwards), :func:`save_autosave` after one curation step (a merge of two units of one group), and
  :func:`load_session`.
- baseline, written the obvious way: h5py writes every dataset into one file on every save
  (events gzip-compressed as event tables are, via :meth:`EventTable.to_h5_group`), then
  reads every dataset back to compute one SHA-256 over them; loading reads every dataset and
  hashes it.
- floor: :func:`numpy.save` of the arrays the stage must write at least (all of them on the first
  save; the assignments afterwards) into one file, flushed to disk, no checksum; loading is
  :func:`numpy.load` of every array. A ratio below 1 against it is the price of the layout,
  the checksums and the checks.

Issue 12 targets at 10^7 events: autosave after one step under 0.3 s, full save under 3 s,
load under 3 s. Peak memory is the process's (``ru_maxrss``; keep it under ~4 GB).

Run: python bench/bench_session_scale.py [--events N] [--features N] [--units N]
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import resource
import sys
import tempfile
import time
from pathlib import Path

import h5py
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rigside.core.events import EventTable  # noqa: E402
from rigside.core.params import Params  # noqa: E402
from rigside.core.units.history import UndoStack  # noqa: E402
from rigside.core.units.operations import MergeUnits  # noqa: E402
from rigside.core.units.session import (  # noqa: E402
    RecordingRef,
    Session,
    file_fingerprint,
    load_session,
    save_autosave,
    save_session,
)
from rigside.core.units.sorting import Sorting, SortingData, Unit  # noqa: E402

RATE, SECONDS, CHANNELS, PER_GROUP = 30000.0, 3600.0, 64, 4


def make_session(n: int, d: int, n_units: int, raw: Path) -> Session:
    rng = np.random.default_rng(0)
    channel = rng.integers(0, CHANNELS, n).astype(np.int32)
    events = EventTable(sample=np.sort(rng.integers(0, int(RATE * SECONDS), n)), channel=channel,
                        group=channel // PER_GROUP, amplitude_uv=rng.normal(-80, 20, n).astype(np.float32),
                        amplitude_sigma=rng.uniform(5, 20, n).astype(np.float32),
                        artefact=rng.random(n) < 0.001, rate_hz=RATE, n_samples=int(RATE * SECONDS),
                        sigma_uv=np.full(CHANNELS, 10.0), floor_sigma=4.0, polarity="negative")
    features = rng.normal(0, 1, (n, d)).astype(np.float32)
    unit_group = np.arange(n_units) % (CHANNELS // PER_GROUP)
    per_group = [np.flatnonzero(unit_group == g) + 1 for g in range(CHANNELS // PER_GROUP)]
    assign = np.empty(n, np.int32)
    for g, ids in enumerate(per_group):
        at = np.flatnonzero(events.group == g)
        assign[at] = rng.choice(ids, len(at))
    units = {int(u): Unit(int(unit_group[u - 1])) for u in range(1, n_units + 1)}
    sorting = Sorting(SortingData.from_events(events, features, [f"f{i}" for i in range(d)]), assign, units,
                      n_units + 1)
    ref = RecordingRef(str(raw), raw.stat().st_size, file_fingerprint(raw), {"channels": CHANNELS})
    return Session(ref, Params(), events, sorting)


def baseline_save(path: Path, s: Session) -> None:
    with h5py.File(path, "w") as f:
        s.events.to_h5_group(f.create_group("events"))
        f.create_dataset("features/values", data=s.sorting.data.features)
        f.create_dataset("sorting/assignments", data=s.sorting.assignments)
        units = s.sorting.units
        f.create_dataset("sorting/unit_id", data=np.array(list(units), np.int32))
        f.create_dataset("sorting/unit_group", data=np.array([u.group for u in units.values()], np.int32))
        f.attrs["labels"] = json.dumps([u.label for u in units.values()])
    baseline_load(path)          # today's check: read everything back for the checksum


def baseline_load(path: Path) -> dict:
    h, out = hashlib.sha256(), {}
    with h5py.File(path, "r") as f:
        f.visititems(lambda name, obj: out.__setitem__(name, obj[()]) if isinstance(obj, h5py.Dataset) else None)
    for name in sorted(out):
        h.update(np.ascontiguousarray(out[name]).tobytes())
    return out


def arrays_of(s: Session, everything: bool) -> list[np.ndarray]:
    """The arrays a save must write: all of them, or only what curation changes."""
    state = [s.sorting.assignments]
    if not everything:
        return state
    return [*(getattr(s.events, c) for c in s.events.columns), s.sorting.data.features,
            s.sorting.origin.assignments, *state]


def floor_save(path: Path, arrays: list[np.ndarray]) -> None:
    with open(path, "wb") as fh:
        for arr in arrays:
            np.save(fh, arr)
        fh.flush()
        os.fsync(fh.fileno())


def floor_load(path: Path, n: int) -> list[np.ndarray]:
    with open(path, "rb") as fh:
        return [np.load(fh) for _ in range(n)]


def timed(fn) -> float:
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--events", type=int, default=10**7)
    ap.add_argument("--features", type=int, default=10)
    ap.add_argument("--units", type=int, default=200)
    a = ap.parse_args()
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        raw = d / "rec.bin"
        raw.write_bytes(np.zeros(1 << 16, np.uint8).tobytes())
        s = make_session(a.events, a.features, a.units, raw)
        print(f"{a.events} events x {a.features} features, {a.units} units")
        p, base, floor = d / "s.h5", d / "base.h5", d / "floor.npy"
        steps = UndoStack(s.sorting)
        ids = s.sorting.unit_ids()
        steps.push(MergeUnits([ids[2], ids[18]]))   # stands in for the first pass: the journal's opening step

        def stage(ours, everything: bool) -> tuple[float, float, float]:
            arrays = arrays_of(s, everything)
            return timed(ours), timed(lambda: baseline_save(base, s)), timed(lambda: floor_save(floor, arrays))
        n_all = len(arrays_of(s, True))
        times = {"first save": stage(lambda: save_session(p, s), True)}
        steps.push(MergeUnits([ids[0], ids[16]]))
        times["autosave after one step"] = stage(lambda: save_autosave(p, s), False)
        steps.push(MergeUnits([ids[1], ids[17]]))
        times["later save"] = stage(lambda: save_session(p, s), False)
        floor_save(floor, arrays_of(s, True))
        s = steps = None          # free the in-memory session before loading
        back: list = []
        times["load"] = (timed(lambda: back.append(load_session(p))), timed(lambda: baseline_load(base)),
                         timed(lambda: floor_load(floor, n_all)))
        back = None
        sizes = {q.name: q.stat().st_size for q in sorted(d.iterdir())}
    print(f"{'stage':26s} {'rigside s':>10s} {'baseline s':>11s} {'ratio':>7s} {'floor s':>8s} {'ratio':>6s}")
    for name, (ours, plain, least) in times.items():
        print(f"{name:26s} {ours:10.3f} {plain:11.3f} {plain / ours:6.1f}x {least:8.3f} {least / ours:5.2f}x")
    print("files:", ", ".join(f"{k} {v / 1e6:.1f} MB" for k, v in sizes.items()))
    print(f"peak memory {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")


if __name__ == "__main__":
    main()
