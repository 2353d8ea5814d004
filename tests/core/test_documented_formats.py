"""What the README promises about file contents: events HDF5 columns, group numbering."""

from __future__ import annotations

import csv

import h5py
import numpy as np

from rigside.core.events import EventTable
from rigside.core.io.recording import open_recording
from rigside.core.signal.noise import flag_bad
from tests.core.helpers import gaussian


def small_table() -> EventTable:
    return EventTable(sample=np.array([10, 300, 4500]), channel=np.array([0, 3, 1], np.int32),
                      group=np.array([0, 1, 0], np.int32), amplitude_uv=np.array([-50, -80, -60], np.float32),
                      amplitude_sigma=np.array([5, 8, 6], np.float32), artefact=np.zeros(3, bool),
                      rate_hz=30000.0, n_samples=9000, sigma_uv=np.full(4, 10.0), floor_sigma=4.5,
                      polarity="negative")


def test_events_h5_holds_one_dataset_per_csv_column(tmp_path):
    t = small_table()
    t.write_h5(tmp_path / "e.h5")
    t.write_csv(tmp_path / "e.csv")
    header = next(csv.reader(open(tmp_path / "e.csv")))
    with h5py.File(tmp_path / "e.h5", "r") as f:
        g = f["events"]
        assert set(header) <= set(g)
        np.testing.assert_array_equal(g["time_s"][()], np.array([10, 300, 4500]) / 30000.0)
    back = EventTable.read_h5(tmp_path / "e.h5")
    np.testing.assert_array_equal(back.sample, t.sample)


def test_default_group_names_use_the_same_0_based_numbers_as_the_group_column(tmp_path):
    (gaussian(3000, 4) * 100).astype(np.int16).tofile(tmp_path / "r.dat")
    rec = open_recording(tmp_path / "r.dat", channels=4, rate_hz=30000.0, group_size=2)
    assert rec.group_names == ["group 0", "group 1"]
    assert rec.channel_group.tolist() == [0, 0, 1, 1]


def test_noisy_cut_off_is_5_times_the_median():
    sigma = np.array([10.0, 10.0, 10.0, 49.0, 51.0])
    assert flag_bad(sigma, np.zeros(5)) == {4: "noisy"}
