"""Site positions in the layout: metadata [probe] table, HDF5 attributes, positions CSV, and their checks."""

from __future__ import annotations

import h5py
import numpy as np
import pytest

from rigside.core.errors import RecordingError
from rigside.core.io.recording import Layout, metadata_path, open_recording, read_metadata, write_metadata
from tests.core.helpers import gaussian, write_raw

X = [0.0, 20.0, 0.0, 20.0]
Y = [0.0, 0.0, 20.0, 20.0]


def raw(tmp_path, channels=4, **layout):
    path = tmp_path / "r.dat"
    (gaussian(3000, channels) * 50).astype(np.int16).tofile(path)
    write_metadata(path, Layout(channels=channels, rate_hz=30000.0, **layout))
    return path


def test_metadata_probe_table_round_trips_and_shanks_become_groups(tmp_path):
    # common practice, no source: a layout written and read back is the same layout
    path = raw(tmp_path, x_um=X, y_um=Y, shank=[0, 0, 1, 1])
    assert "[probe]" in metadata_path(path).read_text()
    layout = read_metadata(metadata_path(path))
    assert (layout.x_um, layout.y_um, layout.shank) == (X, Y, [0, 0, 1, 1])
    rec = open_recording(path)
    np.testing.assert_array_equal(rec.positions, np.column_stack([X, Y]))
    assert rec.shank.tolist() == [0, 0, 1, 1]
    assert [g.tolist() for g in rec.groups] == [[0, 1], [2, 3]] and rec.group_names == ["shank 0", "shank 1"]
    assert rec.describe()["y_um"] == Y


def test_given_groups_are_kept_beside_positions(tmp_path):
    path = raw(tmp_path, x_um=X, y_um=Y, groups=[[0, 1, 2, 3]])
    rec = open_recording(path)
    assert [g.tolist() for g in rec.groups] == [[0, 1, 2, 3]] and rec.shank.tolist() == [0, 0, 0, 0]


def test_recordings_without_positions_have_none(tmp_path):
    rec = open_recording(raw(tmp_path))
    assert rec.positions is None and rec.shank is None and "x_um" not in rec.describe()


@pytest.mark.parametrize("layout, message", [
    (dict(x_um=X[:3], y_um=Y), "one value per channel \\(4\\), got 3"),
    (dict(x_um=X), "got only x_um"),
    (dict(x_um=[0.0, float("nan"), 1.0, 2.0], y_um=Y), "finite numbers"),
    (dict(x_um=["a", 1.0, 2.0, 3.0], y_um=Y), "finite numbers"),
    (dict(x_um=X, y_um=Y, shank=[0, 0, -1, 0]), "shanks must be integers"),
    (dict(x_um=[0.0, 0.0, 1.0, 2.0], y_um=[5.0, 5.0, 1.0, 2.0]), "channels 0 and 1 at x=0, y=5 um"),
])
def test_bad_positions_are_refused(layout, message):
    with pytest.raises(RecordingError, match=message):
        Layout(channels=4, rate_hz=30000.0, **layout).validate()


def test_one_position_on_two_shanks_is_allowed():
    Layout(channels=2, rate_hz=30000.0, x_um=[0.0, 0.0], y_um=[0.0, 0.0], shank=[0, 1]).validate()


def test_unknown_probe_key_in_metadata_is_refused(tmp_path):
    path = raw(tmp_path, x_um=X, y_um=Y)
    meta = metadata_path(path)
    meta.write_text(meta.read_text() + "z_um = [1, 2, 3, 4]\n")
    with pytest.raises(RecordingError, match="keys must be among x_um, y_um, shank, got z_um"):
        open_recording(path)


def test_hdf5_attributes_give_positions(tmp_path):
    path = tmp_path / "r.h5"
    with h5py.File(path, "w") as f:
        d = f.create_dataset("data", data=gaussian(2000, 4))
        d.attrs.update(rate_hz=30000.0, x_um=np.array(X), y_um=np.array(Y), shank=np.array([0, 1, 0, 1]))
    rec = open_recording(path)
    assert rec.positions[:, 1].tolist() == Y and [g.tolist() for g in rec.groups] == [[0, 2], [1, 3]]
    rec.close()


@pytest.mark.parametrize("attrs, message", [
    (dict(x_um=np.array(X)), "got only x_um"),
    (dict(x_um=np.array(X[:2]), y_um=np.array(Y[:2])), "one value per channel"),
    (dict(x_um=np.array([b"a", b"b", b"c", b"d"]), y_um=np.array(Y)), "1-D array of numbers"),
    (dict(x_um=np.array(X), y_um=np.array(Y), shank=np.array([0.5, 0, 0, 0])), "1-D array of integers"),
])
def test_bad_hdf5_position_attributes_are_refused(tmp_path, attrs, message):
    path = tmp_path / "r.h5"
    with h5py.File(path, "w") as f:
        d = f.create_dataset("data", data=gaussian(2000, 4))
        d.attrs.update(rate_hz=30000.0, **attrs)
    with pytest.raises(RecordingError, match=message):
        open_recording(path)


def test_positions_csv_overrides_metadata_in_any_column_order(tmp_path):
    path = raw(tmp_path, x_um=X, y_um=Y)
    csv = tmp_path / "sites.csv"
    csv.write_text("\ufeffy_um,channel,shank,x_um\n30,3,1,5\n10,1,0,5\n0,0,0,5\n20,2,1,5\n", encoding="utf-8")
    rec = open_recording(path, positions=csv)
    assert rec.positions.tolist() == [[5, 0], [5, 10], [5, 20], [5, 30]] and rec.shank.tolist() == [0, 0, 1, 1]
    h5 = tmp_path / "r.h5"
    with h5py.File(h5, "w") as f:
        f.create_dataset("data", data=gaussian(2000, 4)).attrs["rate_hz"] = 30000.0
    rec = open_recording(h5, positions=csv)
    assert rec.positions[:, 1].tolist() == [0, 10, 20, 30]
    rec.close()


@pytest.mark.parametrize("text, message", [
    ("", "empty file"),
    ("chan,x_um,y_um\n", "header must be channel,x_um,y_um"),
    ("channel,x_um,y_um,colour\n", "header must be channel,x_um,y_um"),
    ("channel,x_um,y_um\n0,0,0\n1,0,20\n2,0,40\n", "one row per channel \\(4\\), got 3"),
    ("channel,x_um,y_um\n0,0,0\n1,0,20\n1,0,40\n3,0,60\n", "each once, got 1 on line 4"),
    ("channel,x_um,y_um\n0,0,0\n1,0,20\n2,0,40\n4,0,60\n", "0 to 3, each once, got 4"),
    ("channel,x_um,y_um\n0,0,0\n1,0,20\n2,0,40\nthree,0,60\n", "channel must be an integer"),
    ("channel,x_um,y_um\n0,0,0\n1,0,20\n2,0,40\n3,0\n", "must hold 3 cells, got 2"),
    ("channel,x_um,y_um\n0,0,0\n1,0,20\n2,0,40\n3,0,inf\n", "finite numbers"),
    ("channel,x_um,y_um\n0,0,0\n1,0,20\n2,0,40\n3,0,deep\n", "y_um must be a number"),
    ("channel,x_um,y_um\n0,0,0\n1,0,20\n2,0,40\n3,0,40\n", "must not share one position"),
    ("channel,x_um,y_um,shank\n0,0,0,0\n1,0,20,0\n2,0,40,0\n3,0,60,x\n", "shank must be an integer"),
])
def test_bad_positions_files_give_one_clear_error(tmp_path, text, message):
    path = raw(tmp_path)
    csv = tmp_path / "sites.csv"
    csv.write_text(text, encoding="utf-8")
    with pytest.raises(RecordingError, match=message):
        open_recording(path, positions=csv)


def test_missing_binary_or_folder_positions_files_are_refused(tmp_path):
    path = raw(tmp_path)
    with pytest.raises(RecordingError, match="positions file must exist"):
        open_recording(path, positions=tmp_path / "none.csv")
    with pytest.raises(RecordingError, match="must be a file"):
        open_recording(path, positions=tmp_path)
    (tmp_path / "bin.csv").write_bytes(b"\xff\xfe\x00garbage")
    with pytest.raises(RecordingError, match="UTF-8"):
        open_recording(path, positions=tmp_path / "bin.csv")


def test_written_helper_recordings_keep_their_groups(tmp_path):
    rec = write_raw(tmp_path / "g.dat", gaussian(100, 4), groups=[[0, 1], [2, 3]])
    assert rec.groups_given and rec.positions is None
