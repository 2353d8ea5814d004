"""Importing spike trains: every layout read back exactly, bad and hostile files refused with
clear messages (invented data)."""

import zipfile
from datetime import datetime, timezone

import h5py
import numpy as np
import pytest

from rigside.core.errors import SpikeFileError
from rigside.core.io.spike_import import checked_trains
from rigside.core.io.spike_import_files import load_spikes

UNITS = np.array([3, 1, 3, 1, 7])
TIMES = np.array([0.10, 0.20, 0.25, 0.40, 0.05])
SAMPLES = np.array([3000, 6000, 7500, 12000, 1500])


def expect(spikes, units=UNITS, times=TIMES):
    order = np.lexsort((times, units))
    np.testing.assert_array_equal(spikes.units, units[order])
    np.testing.assert_allclose(spikes.times_s, times[order], rtol=0, atol=1e-12)


def write_csv(path, text):
    path.write_text(text)
    return path


# ---- good files of every layout -------------------------------------------------------
def test_csv_seconds_comments_and_extra_columns(tmp_path):
    rows = "".join(f'{u}, {t},"x"\n' for u, t in zip(UNITS, TIMES))
    s = load_spikes(write_csv(tmp_path / "a.csv", "# exported long ago\nUnit,time_s,label\n" + rows))
    expect(s)
    assert s.unit_ids.tolist() == [1, 3, 7] and s.source == "a.csv"
    np.testing.assert_allclose(s.train(3), [0.10, 0.25])


def test_csv_with_byte_order_mark_and_crlf(tmp_path):
    rows = "".join(f"{u},{t}\r\n" for u, t in zip(UNITS, TIMES))
    (tmp_path / "a.csv").write_bytes(("\ufeffunit,time_s\r\n" + rows).encode("utf-8"))
    expect(load_spikes(tmp_path / "a.csv"))


def test_csv_samples_and_milliseconds(tmp_path):
    rows = "".join(f"{x},{u}\n" for u, x in zip(UNITS, SAMPLES))
    expect(load_spikes(write_csv(tmp_path / "a.csv", "sample,unit\n" + rows), rate_hz=30000.0))
    rows = "".join(f"{u},{t * 1000}\n" for u, t in zip(UNITS, TIMES))
    expect(load_spikes(write_csv(tmp_path / "b.csv", "unit,time_ms\n" + rows)))


def test_time_offset(tmp_path):
    rows = "".join(f"{u},{t + 2.0}\n" for u, t in zip(UNITS, TIMES))
    expect(load_spikes(write_csv(tmp_path / "a.csv", "unit,time_s\n" + rows), time_offset_s=2.0))


def test_npz_and_structured_npy(tmp_path):
    np.savez(tmp_path / "a.npz", unit=UNITS, time_s=TIMES)
    expect(load_spikes(tmp_path / "a.npz"))
    np.savez_compressed(tmp_path / "b.npz", unit=UNITS.astype(np.uint16), sample=SAMPLES, rate_hz=np.array(30000.0))
    expect(load_spikes(tmp_path / "b.npz", rate_hz=1.0))       # the stored rate wins
    rec = np.zeros(len(UNITS), dtype=[("unit", "<i4"), ("time_ms", "<f8")])
    rec["unit"], rec["time_ms"] = UNITS, TIMES * 1000
    np.save(tmp_path / "c.npy", rec)
    expect(load_spikes(tmp_path / "c.npy"))


def test_hdf5_group_layout(tmp_path):
    with h5py.File(tmp_path / "a.h5", "w") as f:
        g = f.create_group("old/sorting")
        g["unit"], g["sample"], g["unit_ids"] = UNITS, SAMPLES, np.array([1, 3, 7, 9])
        g.attrs["rate_hz"] = 30000.0
        f["time_s"] = TIMES          # the root holds a time column but no unit column
    expect(load_spikes(tmp_path / "a.h5", group="old/sorting"))
    with pytest.raises(SpikeFileError, match="dataset named unit"):
        load_spikes(tmp_path / "a.h5")


def test_nwb_units_table(tmp_path):
    pynwb = pytest.importorskip("pynwb")   # the nwb extra
    NWBHDF5IO, NWBFile = pynwb.NWBHDF5IO, pynwb.NWBFile
    nwb = NWBFile(session_description="earlier sorting", identifier="t1",
                  session_start_time=datetime(2020, 1, 1, tzinfo=timezone.utc))
    for u in (1, 3, 7):
        nwb.add_unit(spike_times=np.sort(TIMES[UNITS == u]), id=u)
    with NWBHDF5IO(str(tmp_path / "a.nwb"), "w") as io:
        io.write(nwb)
    expect(load_spikes(tmp_path / "a.nwb"))


# ---- bad files ------------------------------------------------------------------------
@pytest.mark.parametrize("text,message", [
    ("", "empty file"),
    ("# only a comment\n", "empty file"),
    ("unit,time_s\n", "at least one spike"),
    ("cluster,time_s\n1,0.5\n", "unit column"),
    ("unit,time\n1,0.5\n", "no unit of time named"),
    ("unit,stamp\n1,0.5\n", "time_s, time_ms or sample"),
    ("unit,time_s,sample\n1,0.5,15000\n", "mixed units of time"),
    ("unit,time_s\n1,0.5\n1,0.4\n", "sorted in time"),
    ("unit,time_s\n1,-0.5\n", "at least 0 s"),
    ("unit,time_s\n1,nan\n", "finite"),
    ("unit,time_s\n1,0.5\n2,abc\n", "line 3 column time_s must be a number"),
    ("unit,time_s\n1.5,0.5\n", "line 2 column unit must be an integer"),
    ("unit,time_s\n1,0.5\n2\n", "line 3 has 1 cells"),
    ("unit,time_s\n1,0.5\n2,", "line 3 column time_s"),
    ("unit,sample\n1,10.5\n", "line 2 column sample must be an integer"),
])
def test_bad_csv(tmp_path, text, message):
    with pytest.raises(SpikeFileError, match=message):
        load_spikes(write_csv(tmp_path / "bad.csv", text), rate_hz=30000.0)


def test_samples_need_a_rate_and_non_utf8_csv(tmp_path):
    with pytest.raises(SpikeFileError, match="sampling rate"):
        load_spikes(write_csv(tmp_path / "a.csv", "unit,sample\n1,10\n"))
    (tmp_path / "b.csv").write_bytes(b"unit,time_s\n1,\xff\xfe\n")
    with pytest.raises(SpikeFileError, match="UTF-8"):
        load_spikes(tmp_path / "b.csv")


def test_times_beyond_the_recording(tmp_path):
    s = load_spikes(write_csv(tmp_path / "a.csv", "unit,time_s\n1,0.5\n1,2.5\n2,7.0\n"))
    s.check_within(7.0)
    with pytest.raises(SpikeFileError, match="within the recording.*1 spikes up to 7 s"):
        s.check_within(6.0)
    ms = load_spikes(write_csv(tmp_path / "b.csv", "unit,time_s\n1,500\n1,5900\n"))
    with pytest.raises(SpikeFileError, match="look like milliseconds"):
        ms.check_within(6.0, 30000.0)
    samples = load_spikes(write_csv(tmp_path / "c.csv", "unit,time_s\n1,1000\n1,170000\n"))
    with pytest.raises(SpikeFileError, match="look like samples"):
        samples.check_within(6.0, 30000.0)


def test_finish_checks_types_and_lengths():
    with pytest.raises(SpikeFileError, match="must be numbers"):
        checked_trains(np.array(["0.1"]), np.array([1]), "x")
    with pytest.raises(SpikeFileError, match="integers or names, got '1.5'"):
        checked_trains(np.array([0.1]), np.array(["1.5"]), "x")       # a number, not a name
    with pytest.raises(SpikeFileError, match="integers or names, got an empty id"):
        checked_trains(np.array([0.1]), np.array([" "]), "x")
    with pytest.raises(SpikeFileError, match="must be whole numbers"):
        checked_trains(np.array([0.1]), np.array([0.5]), "x")
    with pytest.raises(SpikeFileError, match="one unit per spike"):
        checked_trains(np.array([0.1, 0.2]), np.array([1]), "x")
    with pytest.raises(SpikeFileError, match="at least one spike"):
        checked_trains(np.zeros(0), np.zeros(0, int), "x")


def test_unknown_suffix_missing_file_and_group_misuse(tmp_path):
    with pytest.raises(SpikeFileError, match="existing file"):
        load_spikes(tmp_path / "none.csv")
    (tmp_path / "a.mat").write_bytes(b"x")
    with pytest.raises(SpikeFileError, match="must end in"):
        load_spikes(tmp_path / "a.mat")
    write_csv(tmp_path / "a.csv", "unit,time_s\n1,0.5\n")
    with pytest.raises(SpikeFileError, match="HDF5 group"):
        load_spikes(tmp_path / "a.csv", group="x")


# ---- hostile and broken binary files --------------------------------------------------
def test_npy_object_plain_truncated_and_oversized(tmp_path):
    np.save(tmp_path / "obj.npy", np.array([{"run": "code"}], dtype=object), allow_pickle=True)
    with pytest.raises(SpikeFileError, match="object array"):
        load_spikes(tmp_path / "obj.npy")
    np.save(tmp_path / "plain.npy", np.array([[1, 0.5]]))
    with pytest.raises(SpikeFileError, match="structured array"):
        load_spikes(tmp_path / "plain.npy")
    rec = np.zeros(4, dtype=[("unit", "<i8"), ("time_s", "<f8")])
    np.save(tmp_path / "ok.npy", rec)
    raw = (tmp_path / "ok.npy").read_bytes()
    (tmp_path / "cut.npy").write_bytes(raw[:-9])
    with pytest.raises(SpikeFileError, match="truncated"):
        load_spikes(tmp_path / "cut.npy")
    # a header claiming 10^12 rows in a file of a few bytes is refused before any allocation
    header = raw[:raw.index(b"(4,)")] + b"(1000000000000,)" + raw[raw.index(b"(4,)") + 4:raw.index(b"\n") + 1]
    (tmp_path / "huge.npy").write_bytes(header + raw[raw.index(b"\n") + 1:])
    with pytest.raises(SpikeFileError, match="must (hold the|be a NumPy)"):
        load_spikes(tmp_path / "huge.npy")
    (tmp_path / "junk.npy").write_bytes(b"not numpy at all")
    with pytest.raises(SpikeFileError, match="NumPy array file"):
        load_spikes(tmp_path / "junk.npy")


def test_npz_hostile_and_broken(tmp_path):
    np.savez(tmp_path / "obj.npz", unit=np.array([1], dtype=object), time_s=np.array([0.1]))
    with pytest.raises(SpikeFileError, match="object array"):
        load_spikes(tmp_path / "obj.npz")
    np.savez(tmp_path / "two.npz", unit=np.array([1]), time_s=np.array([0.1]), time_ms=np.array([100.0]))
    with pytest.raises(SpikeFileError, match="mixed units of time"):
        load_spikes(tmp_path / "two.npz")
    np.savez(tmp_path / "nounit.npz", time_s=np.array([0.1]))
    with pytest.raises(SpikeFileError, match="unit"):
        load_spikes(tmp_path / "nounit.npz")
    np.savez(tmp_path / "shape.npz", unit=np.array([[1, 2]]), time_s=np.array([[0.1, 0.2]]))
    with pytest.raises(SpikeFileError, match="1-D"):
        load_spikes(tmp_path / "shape.npz")
    np.savez(tmp_path / "ok.npz", unit=np.arange(100), time_s=np.linspace(0, 1, 100))
    raw = (tmp_path / "ok.npz").read_bytes()
    (tmp_path / "cut.npz").write_bytes(raw[:len(raw) // 2])
    with pytest.raises(SpikeFileError, match="readable .npz"):
        load_spikes(tmp_path / "cut.npz")
    # a member whose header claims 10^12 values (8 TB) in a file of a few hundred bytes
    np.save(tmp_path / "t.npy", np.zeros(4))
    raw = (tmp_path / "t.npy").read_bytes().replace(b"(4,)", b"(1000000000000,)")
    with zipfile.ZipFile(tmp_path / "bomb.npz", "w") as zf:
        zf.writestr("unit.npy", raw)
        zf.writestr("time_s.npy", (tmp_path / "t.npy").read_bytes())
    with pytest.raises(SpikeFileError, match="fit its size"):
        load_spikes(tmp_path / "bomb.npz")
    np.savez(tmp_path / "rate.npz", unit=np.array([1]), sample=np.array([5]), rate_hz=np.array([-3.0]))
    with pytest.raises(SpikeFileError, match="rate_hz"):
        load_spikes(tmp_path / "rate.npz")


def test_hdf5_hostile_and_broken(tmp_path):
    with h5py.File(tmp_path / "link.h5", "w") as f:
        f["unit"] = h5py.ExternalLink("/etc/elsewhere.h5", "/unit")
        f["time_s"] = [0.1]
    with pytest.raises(SpikeFileError, match="stored in the file itself"):
        load_spikes(tmp_path / "link.h5")
    with h5py.File(tmp_path / "text.h5", "w") as f:
        f["unit"] = np.array([b"a"])
        f["time_s"] = [0.1]
    with pytest.raises(SpikeFileError, match="1-D numeric dataset"):
        load_spikes(tmp_path / "text.h5")
    with h5py.File(tmp_path / "vlen.h5", "w") as f:
        f.create_dataset("unit", data=[1])
        f.create_dataset("time_s", (1,), dtype=h5py.vlen_dtype(np.float64))
    with pytest.raises(SpikeFileError, match="1-D numeric dataset"):
        load_spikes(tmp_path / "vlen.h5")
    with h5py.File(tmp_path / "unknown.h5", "w") as f:
        f["unit"], f["time_s"], f["unit_ids"] = [1, 2, 5], [0.1, 0.2, 0.3], [1, 2]
    with pytest.raises(SpikeFileError, match=r"unknown units \[5\]"):
        load_spikes(tmp_path / "unknown.h5")
    with h5py.File(tmp_path / "huge.h5", "w") as f:
        f.create_dataset("unit", shape=(10**11,), dtype="i8", chunks=(1 << 16,))
        f["time_s"] = [0.1]
    with pytest.raises(SpikeFileError, match="fit the file"):
        load_spikes(tmp_path / "huge.h5")
    with h5py.File(tmp_path / "nogroup.h5", "w") as f:
        f["unit"], f["time_s"] = [1], [0.1]
    with pytest.raises(SpikeFileError, match="must exist"):
        load_spikes(tmp_path / "nogroup.h5", group="missing")
    raw = (tmp_path / "nogroup.h5").read_bytes()
    (tmp_path / "cut.h5").write_bytes(raw[:len(raw) // 3])
    with pytest.raises(SpikeFileError, match="readable HDF5"):
        load_spikes(tmp_path / "cut.h5")


def test_nwb_broken(tmp_path):
    pynwb = pytest.importorskip("pynwb")   # the nwb extra
    NWBHDF5IO, NWBFile = pynwb.NWBHDF5IO, pynwb.NWBFile
    nwb = NWBFile(session_description="no units", identifier="t2",
                  session_start_time=datetime(2020, 1, 1, tzinfo=timezone.utc))
    with NWBHDF5IO(str(tmp_path / "empty.nwb"), "w") as io:
        io.write(nwb)
    with pytest.raises(SpikeFileError, match="units table"):
        load_spikes(tmp_path / "empty.nwb")
    with h5py.File(tmp_path / "plain.nwb", "w") as f:
        f["x"] = [1]
    with pytest.raises(SpikeFileError, match="readable NWB"):
        load_spikes(tmp_path / "plain.nwb")
    (tmp_path / "text.nwb").write_text("unit,time_s\n1,0.5\n")
    with pytest.raises(SpikeFileError, match="NWB \\(HDF5\\) file"):
        load_spikes(tmp_path / "text.nwb")
