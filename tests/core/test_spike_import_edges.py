"""Imported unit ids at the ends of the int64 range, and listed units that hold no spike
(invented data)."""

import h5py
import numpy as np

from rigside.core.io.spike_import_files import load_spikes

from .helpers import write_nwb_units

BIG = 2**63 - 1


def test_largest_int64_unit_id_keeps_its_spikes(tmp_path):
    p = tmp_path / "big.csv"
    p.write_text(f"unit,time_s\n{BIG},0.5\n3,0.2\n{BIG},1.0\n3,0.9\n")
    s = load_spikes(p)
    ids, starts = s.bounds()
    assert ids.tolist() == [3, BIG] and starts.tolist() == [0, 2, 4]
    np.testing.assert_array_equal(s.train(BIG), [0.5, 1.0])
    assert s.span(3) == (0, 2)


def test_listed_units_without_spikes_are_named(tmp_path):
    p = tmp_path / "u.h5"
    with h5py.File(p, "w") as f:
        f["unit"] = np.array([1, 1, 4])
        f["time_s"] = np.array([0.1, 0.2, 0.3])
        f["unit_ids"] = np.array([1, 2, 4, 9])
    s = load_spikes(p)
    assert s.unit_ids.tolist() == [1, 4] and s.empty_units == (2, 9)
    assert s.empty_note() == "2 listed units without spikes left out: 2, 9"


def test_nwb_units_without_spikes_are_named(tmp_path):
    write_nwb_units(tmp_path / "a.nwb", {5: [0.1, 0.2], 6: []})
    s = load_spikes(tmp_path / "a.nwb")
    assert s.unit_ids.tolist() == [5] and s.empty_units == (6,)
