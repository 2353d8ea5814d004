"""Raw layout on the command line (header, stored-count offset) and HDF5 dataset choice."""

from __future__ import annotations

import csv

import h5py
import numpy as np
import pytest

from rigside.cli.main import main
from rigside.core.errors import RecordingError
from rigside.core.io.recording import Layout, open_recording, read_metadata, write_metadata
from tests.core.helpers import gaussian

RATE, CH = 30000.0, 4


def centred_uint16(tmp_path, header: int):
    """Noise with spikes at known samples, stored as unsigned 16-bit around 32768 after a header."""
    x = gaussian(60000, CH, 30.0, seed=3)
    spikes = np.arange(1500, 59000, 2400)
    for s in spikes:
        x[s - 3:s + 4, 1] -= np.array([60, 200, 420, 500, 420, 200, 60], np.float32)
    stored = np.round(x + 32768).astype("<u2")
    raw = tmp_path / "lab.dat"
    raw.write_bytes(b"H" * header + stored.tobytes())
    return raw, stored, spikes


def test_header_bytes_and_offset_counts_read_the_samples_exactly(tmp_path):
    raw, stored, _ = centred_uint16(tmp_path, 512)
    rec = open_recording(raw, channels=CH, rate_hz=RATE, dtype="uint16", gain_uv=0.5, header_bytes=512,
                         offset_counts=32768)
    assert rec.n_samples == len(stored)
    # microvolts = (stored - zero) x gain: the definition of the layout (common practice, no source)
    np.testing.assert_allclose(rec.read(0, 1000), (stored[:1000].astype(np.float64) - 32768) * 0.5, atol=1e-3)


def test_detect_with_header_bytes_finds_spikes_at_their_samples(tmp_path):
    raw, _, spikes = centred_uint16(tmp_path, 512)
    out = tmp_path / "ev.csv"
    assert main(["detect", str(raw), "--channels", "4", "--rate", "30000", "--dtype", "uint16",
                 "--header-bytes", "512", "--offset-counts", "32768", "--group-size", "4",
                 "--out", str(out), "--quiet"]) == 0
    found = np.array([int(r["sample"]) for r in csv.DictReader(open(out))])
    near = np.abs(found[:, None] - spikes[None, :]).min(axis=0)
    assert np.all(near <= 1), near   # without the header option every time moves by 128 samples


def test_a_size_error_says_how_to_set_the_header(tmp_path, capsys):
    raw, _, _ = centred_uint16(tmp_path, 510)
    code = main(["detect", str(raw), "--channels", "4", "--rate", "30000", "--dtype", "uint16",
                 "--out", str(tmp_path / "e.csv"), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and "set --header-bytes or header_bytes in lab.rigside.toml" in err
    assert not (tmp_path / "e.csv").exists()


def test_metadata_file_keeps_header_and_offset_counts(tmp_path):
    raw, stored, _ = centred_uint16(tmp_path, 64)
    write_metadata(raw, Layout(channels=CH, rate_hz=RATE, dtype="uint16", gain_uv=0.5, header_bytes=64,
                               offset_counts=32768))
    layout = read_metadata(tmp_path / "lab.rigside.toml")
    assert (layout.header_bytes, layout.offset_counts) == (64, 32768.0)
    rec = open_recording(raw)
    np.testing.assert_allclose(rec.read(0, 10), (stored[:10].astype(np.float64) - 32768) * 0.5, atol=1e-3)
    with pytest.raises(RecordingError, match="offset in stored counts must be a finite number"):
        Layout(channels=CH, rate_hz=RATE, offset_counts=float("nan")).validate()


def h5_with(path, **datasets):
    with h5py.File(path, "w") as f:
        f.attrs["rate_hz"] = RATE
        for name, data in datasets.items():
            f.create_dataset(name, data=data)
    return path


def test_hdf5_with_several_datasets_names_them_and_asks_for_one(tmp_path, capsys):
    x = gaussian(30000, CH, 20.0)
    path = h5_with(tmp_path / "two.h5", raw=x, lfp=x[::10].copy())
    out = tmp_path / "e.csv"
    code = main(["detect", str(path), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and "--dataset" in err and "raw" in err and "lfp" in err and not out.exists()
    assert main(["detect", str(path), "--dataset", "raw", "--out", str(out), "--quiet"]) == 0


def test_a_transposed_hdf5_dataset_gets_a_hint(tmp_path):
    path = h5_with(tmp_path / "t.h5", data=gaussian(30000, CH).T.copy())
    with pytest.raises(RecordingError, match="channels x samples .transpose it."):
        open_recording(path)
