"""Hostile recordings and metadata refused with one RecordingError line (files built here)."""

import h5py
import numpy as np
import pytest

from rigside.core.errors import RecordingError
from rigside.core.io.recording import open_recording


def _h5(path, **kw):
    with h5py.File(path, "w") as f:
        ds = f.create_dataset("data", **kw)
        ds.attrs["rate_hz"] = 30000.0
    return path


@pytest.mark.parametrize("kw", [
    dict(shape=(10**12, 8), dtype="f4", chunks=(1024, 8)),            # chunked, nothing written
    dict(shape=(10**9, 8), dtype="i2"),                               # contiguous, never allocated
    dict(shape=(10**6, 8), dtype="i2", chunks=(1000, 8), compression="gzip"),
])
def test_declared_but_unstored_samples_are_refused(tmp_path, kw):
    p = _h5(tmp_path / "huge.h5", **kw)
    assert p.stat().st_size < 100_000
    with pytest.raises(RecordingError, match="must store the .* bytes its shape") as info:
        open_recording(p)
    assert "\n" not in str(info.value)


def test_compressed_fully_written_data_is_accepted(tmp_path):
    data = np.random.default_rng(0).normal(0, 20, (5000, 4)).astype(np.float32)
    p = _h5(tmp_path / "ok.h5", data=data, chunks=(1000, 4), compression="gzip")
    rec = open_recording(p)
    np.testing.assert_array_equal(rec.read(0, 5000), data)
    rec.close()


def _external_storage(tmp_path):
    raw = tmp_path / "samples.raw"
    np.zeros((1000, 4), "<i2").tofile(raw)
    return _h5(tmp_path / "ext.h5", shape=(1000, 4), dtype="<i2", external=[(str(raw), 0, 8000)])


def _virtual(tmp_path):
    src = _h5(tmp_path / "src.h5", data=np.ones((1000, 4), np.float32))
    layout = h5py.VirtualLayout(shape=(1000, 4), dtype="f4")
    layout[:] = h5py.VirtualSource(str(src), "data", shape=(1000, 4))
    with h5py.File(tmp_path / "virt.h5", "w") as f:
        f.create_virtual_dataset("data", layout).attrs["rate_hz"] = 30000.0
    return tmp_path / "virt.h5"


def _external_link(tmp_path):
    _h5(tmp_path / "other.h5", data=np.ones((1000, 4), np.float32))
    with h5py.File(tmp_path / "link.h5", "w") as f:
        f["data"] = h5py.ExternalLink(str(tmp_path / "other.h5"), "/data")
    return tmp_path / "link.h5"


@pytest.mark.parametrize("make, what", [(_external_storage, "external storage"), (_virtual, "a virtual dataset"),
                                        (_external_link, "an external link")])
def test_samples_in_other_files_need_permission(tmp_path, make, what):
    p = make(tmp_path)
    with pytest.raises(RecordingError, match=f"allow other files with --allow-external.*got {what}"):
        open_recording(p, dataset="data")
    rec = open_recording(p, dataset="data", allow_external=True)
    assert rec.n_samples == 1000 and rec.read(0, 10).shape == (10, 4)
    rec.close()


@pytest.mark.parametrize("attrs, message", [
    ({"rate_hz": "30000"}, "rate_hz must be one number"),
    ({"rate_hz": 30000.0, "gain_uv": "0.195"}, "gain_uv must be one number"),
    ({"rate_hz": True}, "rate_hz must be one number"),
])
def test_hdf5_attributes_given_as_text_are_refused(tmp_path, attrs, message):
    with h5py.File(tmp_path / "t.h5", "w") as f:
        ds = f.create_dataset("data", data=np.zeros((100, 2), np.float32))
        ds.attrs.update(attrs)
    with pytest.raises(RecordingError, match=message):
        open_recording(tmp_path / "t.h5")


@pytest.mark.parametrize("text, match", [
    ("[recording]\nschema = 99\nchannels = 2\nrate_hz = 30000\n", "schema must be 1, got 99"),
    ("[recording]\nschema = true\nchannels = 2\nrate_hz = 30000\n", "schema must be 1, got True"),
    ("[recording]\nchannels = true\nrate_hz = 30000\n", "channel count must be an integer"),
    ('[recording]\nchannels = 2\nrate_hz = "30000"\n', "sampling rate must be a number"),
    ("[recording]\nchannels = 2\nrate_hz = 30000\nheader_bytes = false\n", "header length"),
    ("[recording]\nchannels = 2\nrate_hz = 30000\n[[group]]\nchannels = [true]\n", "group channels must be integers"),
    ("[recording]\nchannels = " + "[" * 50_000 + "]" * 50_000 + "\n", "nested at most"),
], ids=["schema-99", "schema-bool", "channels-bool", "rate-text", "header-bool", "group-bool", "deep"])
def test_loose_metadata_is_refused(tmp_path, text, match):
    np.zeros((10, 2), np.int16).tofile(tmp_path / "r.bin")
    (tmp_path / "r.rigside.toml").write_text(text)
    with pytest.raises(RecordingError, match=match):
        open_recording(tmp_path / "r.bin")
