"""Reading an NWB ElectricalSeries as a recording (files written with pynwb, invented data)."""

import hashlib

import h5py
import numpy as np
import pytest

from rigside.core.errors import RecordingError
from rigside.core.io.layout import Layout
from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.signal.pipeline import detect
from tests.core.helpers import gaussian

pynwb = pytest.importorskip("pynwb")
from tests.core.nwb_files import write_nwb  # noqa: E402 (needs pynwb)

GROUPS = [[0, 1, 2, 3], [4, 5, 6, 7]]
X = [0.0, 0.0, 20.0, 20.0, 0.0, 0.0, 20.0, 20.0]
Y = [0.0, 25.0, 0.0, 25.0, 0.0, 25.0, 0.0, 25.0]


def counts(n=6000, channels=8, seed=0):
    return np.round(gaussian(n, channels, 300.0, seed)).astype(np.int16)


def test_microvolts_follow_conversion_offset_and_channel_conversion(tmp_path):
    data = counts()
    cc = np.linspace(0.5, 2.0, 8)
    path = write_nwb(tmp_path / "r.nwb", data, conversion=0.195e-6, offset=-1e-5, channel_conversion=cc)
    rec = open_recording(path)
    with pynwb.NWBHDF5IO(str(path), "r") as io:   # pynwb's own conversion is the reference
        want = io.read().acquisition["raw"].get_data_in_units()[100:900] * 1e6
    got = rec.read(100, 900)
    assert got.dtype == np.float32 and got.shape == (800, 8)
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-4)
    np.testing.assert_allclose(rec.read(100, 900, np.array([6, 1])), want[:, [6, 1]], rtol=1e-6, atol=1e-4)
    assert rec.rate_hz == 30000.0 and rec.n_samples == 6000 and rec.n_channels == 8


def test_one_gain_rides_on_the_layout_like_a_raw_file(tmp_path):
    rec = open_recording(write_nwb(tmp_path / "r.nwb", counts(), conversion=0.195e-6, offset=2e-6))
    assert rec.layout.gain_uv == pytest.approx(0.195) and rec.layout.offset_uv == pytest.approx(2.0)
    assert rec.read_stored(0, 10).dtype == np.int16      # stored values, scaled by the filter kernel


def test_electrode_groups_and_positions_become_the_layout(tmp_path):
    rec = open_recording(write_nwb(tmp_path / "r.nwb", counts(), groups=GROUPS, positions=(X, Y)))
    assert [g.tolist() for g in rec.groups] == GROUPS and rec.group_names == ["tt0", "tt1"]
    assert rec.layout.x_um == X and rec.layout.y_um == Y and rec.layout.shank == [0, 0, 0, 0, 1, 1, 1, 1]
    assert rec.describe()["positions"].startswith("positions from rel_x/rel_y")
    brain = open_recording(write_nwb(tmp_path / "b.nwb", counts(), groups=GROUPS, positions=(X, Y),
                                     position_columns=("x", "y")))
    assert brain.layout.x_um == X and brain.layout.y_um == Y


def test_placeholder_positions_are_not_taken(tmp_path):
    # every electrode at 0, 0 (a common placeholder): kept out of the layout, and said so
    rec = open_recording(write_nwb(tmp_path / "r.nwb", counts(), positions=([0.0] * 8, [0.0] * 8)))
    assert rec.layout.x_um is None and "distinct positions" in rec.describe()["positions"]
    nan = open_recording(write_nwb(tmp_path / "n.nwb", counts(), positions=([np.nan] * 8, Y)))
    assert nan.layout.x_um is None and "finite" in nan.describe()["positions"]


def test_layout_positions_are_validated():
    good = Layout(channels=2, rate_hz=30000.0, x_um=[0.0, 0.0], y_um=[0.0, 20.0])
    good.validate()
    Layout(channels=2, rate_hz=30000.0, x_um=[0.0, 0.0], y_um=[0.0, 0.0], shank=[0, 1]).validate()
    for bad, msg in ((dict(x_um=[0.0, 0.0]), "both"), (dict(x_um=[0.0], y_um=[0.0]), "one value per channel"),
                     (dict(x_um=[0.0, np.inf], y_um=[0.0, 1.0]), "finite"),
                     (dict(x_um=[1.0, 1.0], y_um=[2.0, 2.0]), "distinct"),
                     (dict(x_um=[1.0, 1.0], y_um=[2.0, 3.0], shank=[0, 0.5]), "integers")):
        with pytest.raises(RecordingError, match=msg):
            Layout(channels=2, rate_hz=30000.0, **bad).validate()


def test_rate_from_regular_timestamps_and_irregular_ones_refused(tmp_path):
    data = counts(3000)
    t = 10.0 + np.arange(3000) / 20000.0
    rec = open_recording(write_nwb(tmp_path / "t.nwb", data, timestamps=np.round(t, 6)))   # microsecond clock
    assert rec.rate_hz == pytest.approx(20000.0, rel=1e-6) and rec.describe()["start_time_s"] == 10.0
    gap = t.copy()
    gap[1500:] += 2 / 20000.0                                                       # two samples dropped
    with pytest.raises(RecordingError, match="evenly spaced.*irregular"):
        open_recording(write_nwb(tmp_path / "g.nwb", data, timestamps=gap))


def test_several_series_need_a_name(tmp_path):
    path = write_nwb(tmp_path / "s.nwb", counts(), series=("raw_a", "raw_b"))
    with pytest.raises(RecordingError, match="--series.*acquisition/raw_a, acquisition/raw_b"):
        open_recording(path)
    assert open_recording(path, series="raw_b").series == "acquisition/raw_b"
    assert open_recording(path, series="/acquisition/raw_a").series == "acquisition/raw_a"
    with pytest.raises(RecordingError, match="--series must name one"):
        open_recording(path, series="lfp")


def test_detection_reads_blocks_never_the_whole_dataset(tmp_path):
    data = counts(90000, 4)
    path = write_nwb(tmp_path / "c.nwb", data, chunks=(8192, 4))
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    rec = open_recording(path)
    spans = []
    real = rec._ds

    class Spy:                        # records the length of every read from the HDF5 dataset
        def __getitem__(self, key):
            spans.append(key.stop - key.start)
            return real[key]
    rec._ds = Spy()
    params = Params()
    params.run.chunk_s = 0.5
    detect(rec, params)
    assert spans and max(spans) < 30000, max(spans)
    rec.close()
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before        # opened read-only, unchanged


def test_opened_read_only(tmp_path):
    rec = open_recording(write_nwb(tmp_path / "r.nwb", counts()))
    assert rec._file.mode == "r"


@pytest.mark.parametrize("spoil, msg", [
    (lambda f: f.attrs.__setitem__("neurodata_type", "Other"), "2-D dataset|rate_hz"),
    (lambda f: f["acquisition/raw/data"].attrs.__setitem__("unit", "amperes"), "volts"),
    (lambda f: f["acquisition/raw/data"].attrs.__setitem__("conversion", np.nan), "finite"),
    (lambda f: f["acquisition/raw/data"].attrs.__setitem__("conversion", 0.0), "non-zero"),
    (lambda f: f["acquisition/raw/starting_time"].attrs.__delitem__("rate"), "rate"),
    (lambda f: f["acquisition/raw/starting_time"].attrs.__setitem__("rate", 5.0), "sampling rate"),
    (lambda f: f["acquisition/raw"].attrs.__setitem__("neurodata_type", "TimeSeries"), "ElectricalSeries"),
    (lambda f: (f["acquisition/raw"].__delitem__("electrodes"),
                f["acquisition/raw"].create_dataset("electrodes", data=np.array([0, 1, 2]))), "one electrode row"),
    (lambda f: f["acquisition/raw/electrodes"].__setitem__(slice(0, 1), [99]), "row for every electrode"),
])
def test_hostile_nwb_files_are_one_clear_error(tmp_path, spoil, msg):
    path = write_nwb(tmp_path / "h.nwb", counts(2000))
    with h5py.File(path, "a") as f:
        spoil(f)
    with pytest.raises(RecordingError, match=msg):
        open_recording(path)


def test_truncated_nwb_file_is_refused(tmp_path):
    path = write_nwb(tmp_path / "t.nwb", counts(20000))
    raw = path.read_bytes()
    path.write_bytes(raw[: len(raw) // 2])
    with pytest.raises(RecordingError):
        open_recording(path)


def test_per_channel_gains_detect_like_the_same_microvolts_in_a_raw_file(tmp_path):
    from tests.core.helpers import write_raw
    data = counts(60000, 4, seed=3)
    planted = np.arange(1000, 60000, 2000)
    shape = np.array([0.2, 0.5, 0.9, 1.0, 0.9, 0.5, 0.2])        # a 0.2 ms trough on channel 1
    for t in planted:
        data[t - 3:t + 4, 1] -= np.round(2500 * shape).astype(np.int16)
    cc = np.array([1.0, 2.0, 0.5, 1.5])
    rec = open_recording(write_nwb(tmp_path / "g.nwb", data, conversion=0.195e-6, channel_conversion=cc))
    uv = (data.astype(np.float64) * cc * 0.195).astype(np.float32)
    raw = write_raw(tmp_path / "g.bin", uv)
    a, b = detect(rec, Params()), detect(raw, Params())
    np.testing.assert_array_equal(a.sample, b.sample)
    np.testing.assert_array_equal(a.channel, b.channel)
    np.testing.assert_allclose(a.amplitude_uv, b.amplitude_uv, rtol=1e-5, atol=1e-3)
    found = a.sample[a.channel == 1]
    near = np.abs(found[None, :] - planted[:, None]).min(axis=1) <= 3      # within 0.1 ms
    assert near.mean() >= 0.95, near.mean()
