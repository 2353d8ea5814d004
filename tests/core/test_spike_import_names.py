"""Imported sortings whose units are named (text ids such as tt3_u2): kept as given, in natural order."""

import numpy as np
import pytest

from rigside.core.errors import SpikeFileError
from rigside.core.io import spike_import_files
from rigside.core.io.spike_import import natural_key
from rigside.core.io.spike_import_files import load_spikes


def write(path, text):
    path.write_text(text, encoding="utf-8")
    return path


def test_named_units_keep_their_names_in_natural_order(tmp_path):
    s = load_spikes(write(tmp_path / "a.csv", "unit,time_s\ntt3_u10,0.5\ntt3_u2,0.1\nelec12a,0.2\n"
                                              "tt10_u1,0.3\ntt3_u2,0.4\n\"tt3_u2\",0.9\n  elec12a ,1.5\n"))
    assert s.names == ("elec12a", "tt3_u2", "tt3_u10", "tt10_u1")          # natural order, as given
    assert [s.unit_name(u) for u in s.unit_ids] == list(s.names)
    np.testing.assert_array_equal(s.train(1), [0.1, 0.4, 0.9])               # tt3_u2
    np.testing.assert_array_equal(s.train(0), [0.2, 1.5])                    # elec12a
    assert s.shown_ids(s.unit_ids).tolist() == list(s.names)


def test_natural_order_compares_digit_runs_as_numbers():
    # common practice, no source: digit runs as numbers, letters without case
    names = ["u10", "U2", "u1", "a", "tt3_u10", "tt3_u2", "tt10_u1", "7", "10"]
    assert sorted(names, key=natural_key) == ["7", "10", "a", "tt3_u2", "tt3_u10", "tt10_u1", "u1", "U2", "u10"]


def test_integers_and_names_together_are_all_names(tmp_path):
    s = load_spikes(write(tmp_path / "a.csv", "unit,time_s\n3,0.5\n12,0.6\nx1,0.7\n"))
    assert s.names == ("3", "12", "x1")


def test_integer_ids_stay_integers(tmp_path):
    s = load_spikes(write(tmp_path / "a.csv", "unit,time_s\n3,0.5\n12,0.6\n"))
    assert s.names == () and s.unit_ids.tolist() == [3, 12] and s.unit_name(12) == "12"


def test_a_name_in_a_later_block_reads_the_whole_file_as_names(tmp_path, monkeypatch):
    monkeypatch.setattr(spike_import_files, "CSV_BLOCK_BYTES", 64)
    rows = "".join(f"{u},{t / 10:.1f}\n" for t, u in enumerate(["007", "2"] * 10 + ["tt1"]))
    s = load_spikes(write(tmp_path / "a.csv", "unit,time_s\n" + rows))
    assert s.names == ("2", "007", "tt1")                                   # "007" kept as written
    assert len(s.train(1)) == 10 and len(s.train(2)) == 1


@pytest.mark.parametrize("rows, msg", [
    ("1.5,0.5\n", "line 2 column unit must be an integer"),               # a number, not a name
    ("tt1,0.5\n,0.6\n", "empty id"),
    ("tt1,0.5\ntt2,abc\n", "line 3 column time_s must be a number"),
    ("tt1,0.5\ntt1,0.4\n", "sorted in time.*in unit tt1"),
    ("tt1,-0.5\n", "at least 0 s.*unit tt1"),
])
def test_bad_named_files_are_refused(tmp_path, rows, msg):
    with pytest.raises(SpikeFileError, match=msg):
        load_spikes(write(tmp_path / "a.csv", "unit,time_s\n" + rows))


def test_late_spikes_name_their_unit(tmp_path):
    s = load_spikes(write(tmp_path / "a.csv", "unit,time_s\ntt3_u2,0.5\ntt3_u2,9.0\n"))
    with pytest.raises(SpikeFileError, match="first in unit tt3_u2"):
        s.check_within(5.0)


def test_nwb_unit_names_are_kept(tmp_path):
    pynwb = pytest.importorskip("pynwb")
    import datetime
    nwb = pynwb.NWBFile(session_description="named units", identifier="x",
                        session_start_time=datetime.datetime(2026, 1, 1, tzinfo=datetime.timezone.utc))
    nwb.add_unit_column("unit_name", "name of the unit in the earlier sorting")
    for name, times in (("tt3_u10", [0.3, 0.4]), ("tt3_u2", [0.1]), ("elec12a", [0.2, 0.5, 0.6]), ("quiet", [])):
        nwb.add_unit(spike_times=times, unit_name=name)
    with pynwb.NWBHDF5IO(str(tmp_path / "u.nwb"), "w") as io:
        io.write(nwb)
    s = load_spikes(tmp_path / "u.nwb")
    assert [s.unit_name(u) for u in s.unit_ids] == ["elec12a", "tt3_u2", "tt3_u10"]
    np.testing.assert_array_equal(s.train(s.names.index("tt3_u10")), [0.3, 0.4])
    assert s.empty_units == ("quiet",) and "quiet" in s.empty_note()
