import csv
import json

import h5py
import numpy as np
import pytest

from rigside.core.errors import RigsideError
from rigside.core.events import EventTable
from rigside.core.exports.units import bin_count, bin_index, export_sorting
from rigside.core.units.history import UndoStack
from rigside.core.units.operations import MoveEvents, Relabel
from rigside.core.units.sorting import NO_UNIT, Sorting, SortingData, Unit

from .sorting_data import make_events


def small_sorting():
    """Three units on hand-placed samples, some exactly on 1 ms bin edges (rate 30 kHz: 30 samples/ms)."""
    sample = np.array([0, 29, 30, 31, 59, 60, 300, 301, 302, 599, 600, 1799])
    unit = np.array([1, 1, 2, 1, 2, NO_UNIT, 3, 3, 3, 1, 2, 3])
    group = np.where(unit == 3, 1, 0)
    n = len(sample)
    ev = EventTable(sample=sample, channel=group, group=group, amplitude_uv=-np.ones(n) * 50,
                    amplitude_sigma=np.full(n, 6.0), artefact=unit == NO_UNIT, rate_hz=30000.0,
                    n_samples=1800, sigma_uv=np.ones(2), floor_sigma=4.0)
    data = SortingData.from_events(ev, np.zeros((n, 1), np.float32), ["f0"])
    units = {1: Unit(0, "single unit"), 2: Unit(0, "multi-unit"), 3: Unit(1, "not neural", "line noise")}
    return ev, Sorting(data, unit, units, next_id=4)


def test_csv_npy_and_binned_matrix(tmp_path):
    ev, s = small_sorting()
    out = export_sorting(ev, s, tmp_path / "x")
    assert sorted(p.name for p in (tmp_path / "x").iterdir()) == [
        "binned.h5", "export.json", "unit_1.npy", "unit_2.npy", "unit_3.npy", "unit_times.csv"]
    rows = list(csv.DictReader(open(out["csv"][0])))
    assert list(rows[0]) == ["unit", "label", "time_s"]
    assert [(int(r["unit"]), r["label"]) for r in rows][:4] == [(1, "single unit")] * 4
    assert len(rows) == 11                                   # the artefact (no unit) is not exported
    for u in (1, 2, 3):
        t = np.load(tmp_path / "x" / f"unit_{u}.npy")
        assert np.array_equal(t, ev.sample[s.assignments == u] / 30000.0)
        assert np.allclose([float(r["time_s"]) for r in rows if int(r["unit"]) == u], t, atol=5e-8)
    with h5py.File(out["binned"][0]) as f:
        counts = f["counts"][()]
        assert list(f["unit_id"][()]) == [1, 2, 3]
        assert f.attrs["n_bins"] == 60 and f.attrs["bin_s"] == 0.001
        assert list(f["unit_label"].asstr()[()]) == ["single unit", "multi-unit", "not neural"]   # by name
    # reference: numpy's histogram with edges k * 1 ms, k = 0..60 (half-open bins)
    edges = np.arange(61) * 0.001
    for row, u in enumerate((1, 2, 3)):
        ref, _ = np.histogram(ev.sample[s.assignments == u] / 30000.0, edges)
        assert np.array_equal(counts[row], ref)
    # spikes at samples 30 and 60 (exactly 1 ms and 2 ms) open the next bin
    assert counts[1, 1] == 2 and counts[0, 0] == 2
    manifest = json.loads((tmp_path / "x" / "export.json").read_text())
    assert [m["count"] for m in manifest["units"]] == [4, 3, 4]


def test_label_filter_and_bad_bin_width(tmp_path):
    ev, s = small_sorting()
    out = export_sorting(ev, s, tmp_path, labels=["single unit"])
    assert [p.name for p in out["npy"]] == ["unit_1.npy"]
    with pytest.raises(RigsideError, match="bin width must be a finite number"):
        export_sorting(ev, s, tmp_path, bin_ms=0)
    with pytest.raises(RigsideError, match="export labels must be among"):
        export_sorting(ev, s, tmp_path, labels=["reject"])


def test_binning_matches_histogram_on_many_random_times():
    rng = np.random.default_rng(3)
    duration = 12.345
    for bin_ms in (1.0, 0.7, 2.5):
        bin_s = bin_ms / 1000
        n_bins = bin_count(duration, bin_s)
        assert n_bins == int(np.ceil(duration / bin_s - 1e-9))
        t = np.concatenate([rng.uniform(0, duration, 50000), np.arange(n_bins) * bin_s])
        edges = np.arange(n_bins + 1) * bin_s
        ref, _ = np.histogram(t, edges)       # reference: numpy.histogram
        assert np.array_equal(np.bincount(bin_index(t, bin_s, n_bins), minlength=n_bins), ref)
    with pytest.raises(RigsideError, match="within the"):
        bin_index(np.array([5.0]), 0.001, 10)


def test_export_after_curation_matches_assignments(tmp_path):
    events, x, names, truth = make_events(n=3000, n_groups=2, clusters=2, seed=41)
    s = Sorting(SortingData.from_events(events, x, names))
    # hand-made units instead of clustering: two per group by the true cluster
    u = np.where(truth >= 0, truth + 1, NO_UNIT).astype(np.int32)
    s = Sorting(s.data, u, {k + 1: Unit(k // 2) for k in range(4)}, next_id=5)
    stack = UndoStack(s)
    stack.push(MoveEvents(s.events_of(1)[:100], None))
    stack.push(Relabel([2], "single unit"))
    out = export_sorting(events, s, tmp_path)
    total = sum(len(np.load(p)) for p in out["npy"])
    assert total == int(np.sum(s.assignments != NO_UNIT))
    assert len(np.load(tmp_path / "unit_5.npy")) == 100
