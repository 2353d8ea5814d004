import os

import h5py
import numpy as np
import pytest

from rigside.core.errors import RecordingError
from rigside.core.io.columns import take_channels
from rigside.core.io.recording import Layout, RawRecording, metadata_path, open_recording, read_metadata, write_metadata

from .helpers import write_raw


@pytest.mark.parametrize("dtype", ["int16", "uint16", "int32", "float32"])
def test_raw_types_gain_and_offset(tmp_path, dtype):
    data = (np.arange(60).reshape(20, 3) % 17).astype(dtype)
    rec = write_raw(tmp_path / "r.bin", data, gain_uv=0.5, offset_uv=-2.0)
    got = open_recording(tmp_path / "r.bin").read(0, 20)
    np.testing.assert_allclose(got, data.astype(np.float64) * 0.5 - 2.0, rtol=1e-6)
    assert rec.n_samples == 20 and rec.n_channels == 3


def test_read_only_and_never_modified(tmp_path):
    data = np.arange(4000, dtype=np.int16).reshape(1000, 4)
    rec = write_raw(tmp_path / "r.bin", data)
    before = (tmp_path / "r.bin").read_bytes()
    os.chmod(tmp_path / "r.bin", 0o444)
    rec2 = open_recording(tmp_path / "r.bin")
    block = rec2.read(10, 20)
    block[:] = 0  # writing the returned copy must not reach the file
    with pytest.raises(OSError):
        os.write(rec2._file._fh.fileno(), b"x")  # the file is open read-only
    assert (tmp_path / "r.bin").read_bytes() == before
    rec.close()
    rec2.close()


def test_groups_from_metadata_and_group_size(tmp_path):
    data = np.zeros((10, 8), np.int16)
    write_raw(tmp_path / "r.bin", data, groups=[[0, 1, 2, 3], [4, 5, 6, 7]])
    rec = open_recording(tmp_path / "r.bin")
    assert [g.tolist() for g in rec.groups] == [[0, 1, 2, 3], [4, 5, 6, 7]]
    rec = open_recording(tmp_path / "r.bin", group_size=3)
    assert [g.tolist() for g in rec.groups] == [[0, 1, 2], [3, 4, 5], [6, 7]]
    assert rec.channel_group.tolist() == [0, 0, 0, 1, 1, 1, 2, 2]


def test_group_names_with_quotes_and_backslashes_round_trip(tmp_path):
    # TOML 1.0 basic strings: a quote or backslash inside a name must be escaped by the writer
    names = ['bundle "A"', "left\\right", "tétrode 2"]
    layout = Layout(channels=6, rate_hz=30000.0, groups=[[0, 1], [2, 3], [4, 5]], group_names=names)
    (tmp_path / "r.bin").write_bytes(b"")
    write_metadata(tmp_path / "r.bin", layout)
    back = read_metadata(metadata_path(tmp_path / "r.bin"))
    assert back.group_names == names and back.groups == [[0, 1], [2, 3], [4, 5]]
    assert (back.channels, back.rate_hz, back.dtype) == (6, 30000.0, "int16")


def test_options_without_metadata(tmp_path):
    np.zeros((100, 2), np.int16).tofile(tmp_path / "x.dat")
    with pytest.raises(RecordingError, match="needs a metadata file"):
        open_recording(tmp_path / "x.dat")
    rec = open_recording(tmp_path / "x.dat", channels=2, rate_hz=20000.0)
    assert rec.n_samples == 100


def test_hdf5_recording(tmp_path):
    data = np.random.default_rng(0).integers(-100, 100, (500, 4)).astype(np.int16)
    with h5py.File(tmp_path / "r.h5", "w") as f:
        ds = f.create_dataset("acq/voltage", data=data)
        ds.attrs.update(rate_hz=25000.0, gain_uv=2.0, channel_group=[0, 0, 1, 1])
    rec = open_recording(tmp_path / "r.h5")
    np.testing.assert_allclose(rec.read(100, 200), data[100:200] * 2.0)
    assert rec.rate_hz == 25000.0 and [g.tolist() for g in rec.groups] == [[0, 1], [2, 3]]
    with h5py.File(tmp_path / "norate.h5", "w") as f:
        f.create_dataset("x", data=data)
    with pytest.raises(RecordingError, match="rate_hz"):
        open_recording(tmp_path / "norate.h5")
    with h5py.File(tmp_path / "one.h5", "w") as f:
        f.create_dataset("x", data=np.zeros(10))
    with pytest.raises(RecordingError, match="2-D dataset"):
        open_recording(tmp_path / "one.h5")


def test_bad_files_get_clear_messages(tmp_path):
    with pytest.raises(RecordingError, match="must exist"):
        open_recording(tmp_path / "missing.bin")
    (tmp_path / "empty.bin").write_bytes(b"")
    with pytest.raises(RecordingError, match="must not be empty"):
        open_recording(tmp_path / "empty.bin", channels=4, rate_hz=30000.0)
    (tmp_path / "odd.bin").write_bytes(b"\x00" * 15)
    with pytest.raises(RecordingError, match="multiple of channels x item size"):
        open_recording(tmp_path / "odd.bin", channels=4, rate_hz=30000.0)
    with pytest.raises(RecordingError, match="must be a file"):
        open_recording(tmp_path)
    with pytest.raises(RecordingError, match="channel count"):
        RawRecording(tmp_path / "odd.bin", Layout(channels=0, rate_hz=30000.0))
    with pytest.raises(RecordingError, match="sample type"):
        open_recording(tmp_path / "odd.bin", channels=1, rate_hz=30000.0, dtype="int8")


def test_nan_in_float_data_is_reported_with_place(tmp_path):
    data = np.zeros((100, 2), np.float32)
    data[42, 1] = np.nan
    rec = write_raw(tmp_path / "f.bin", data)
    with pytest.raises(RecordingError, match="NaN or Inf at sample 42, channel 1"):
        rec.read(0, 100)
    data[42, 1] = np.inf
    data.tofile(tmp_path / "f.bin")
    with pytest.raises(RecordingError, match="finite"):
        open_recording(tmp_path / "f.bin").read(40, 50)


@pytest.mark.parametrize("text,match", [
    ("not toml [[[", "valid TOML"),
    ("[recording]\nchannels = 2\n", "must give rate_hz"),
    ("[recording]\nchannels = 2\nrate_hz = 30000\nmystery = 1\n", "keys must be among"),
    ("[recording]\nchannels = 2\nrate_hz = 30000\n[[group]]\nchannels = [0, 5]\n",
     "group channels must be integers from 0 to 1"),
    ("[recording]\nchannels = 2\nrate_hz = 30000\n[[group]]\nchannels = [0]\n[[group]]\nchannels = [0]\n",
     "must not overlap"),
    ("[recording]\nchannels = 2\nrate_hz = -1\n", "sampling rate"),
])
def test_hostile_metadata(tmp_path, text, match):
    np.zeros((10, 2), np.int16).tofile(tmp_path / "r.bin")
    (tmp_path / "r.rigside.toml").write_text(text)
    with pytest.raises(RecordingError, match=match):
        open_recording(tmp_path / "r.bin")


def test_fingerprint_detects_change(tmp_path):
    data = np.zeros((1000, 2), np.int16)
    rec = write_raw(tmp_path / "r.bin", data)
    fp = rec.fingerprint()
    rec.close()
    data[500, 0] = 1
    data.tofile(tmp_path / "r.bin")
    assert open_recording(tmp_path / "r.bin").fingerprint() != fp


def test_read_range_checked(tmp_path):
    rec = write_raw(tmp_path / "r.bin", np.zeros((10, 1), np.int16))
    with pytest.raises(RecordingError, match="read range"):
        rec.read(5, 11)


def test_truncated_and_hostile_hdf5(tmp_path):
    data = np.zeros((5000, 4), np.int16)
    with h5py.File(tmp_path / "r.h5", "w") as f:
        f.create_dataset("x", data=data).attrs["rate_hz"] = 30000.0
    raw = (tmp_path / "r.h5").read_bytes()
    (tmp_path / "cut.h5").write_bytes(raw[: len(raw) // 3])
    with pytest.raises(RecordingError, match="readable HDF5|2-D dataset"):
        open_recording(tmp_path / "cut.h5").read(0, 5000)
    with h5py.File(tmp_path / "text.h5", "w") as f:
        f.create_dataset("x", data=np.array([[b"a", b"b"]] * 10)).attrs["rate_hz"] = 30000.0
    with pytest.raises(RecordingError, match="numeric"):
        open_recording(tmp_path / "text.h5")
    with h5py.File(tmp_path / "cg.h5", "w") as f:
        ds = f.create_dataset("x", data=data)
        ds.attrs.update(rate_hz=30000.0, channel_group=[0, 1])
    with pytest.raises(RecordingError, match="one group per channel"):
        open_recording(tmp_path / "cg.h5")
    with h5py.File(tmp_path / "rate.h5", "w") as f:
        f.create_dataset("x", data=data).attrs["rate_hz"] = float("nan")
    with pytest.raises(RecordingError, match="sampling rate"):
        open_recording(tmp_path / "rate.h5")


@pytest.mark.parametrize("channels", [[3, 0, 5], [1], [5, 5, 0], [-1, 2], [], [0, 1, 2, 3, 4, 5], [-6, 1, 2, 3, 4, 5]])
def test_channel_selection_equals_numpy_fancy_indexing(channels):
    # reference: numpy's own fancy indexing of columns
    block = np.arange(7 * 6, dtype=np.int16).reshape(7, 6)
    got = take_channels(block, np.array(channels, dtype=np.int64))
    np.testing.assert_array_equal(got, block[:, channels])
    assert got.flags.c_contiguous and got.dtype == block.dtype
    with pytest.raises(IndexError, match="within the block's 6 channels"):
        take_channels(block, np.array([6]))
