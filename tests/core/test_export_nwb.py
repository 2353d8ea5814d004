"""NWB export: the file passes the standard's own validator, and what pynwb reads back is what the
session holds (spike times equal to the CSV export, labels, quality columns, electrodes, waveforms,
provenance); a copy of an NWB recording keeps its data; inputs are never written."""

import csv
import hashlib
import json
import sys

import numpy as np
import pytest
from scipy import signal

from rigside.core import __version__
from rigside.core.errors import RigsideError
from rigside.core.exports.nwb import export_nwb
from rigside.core.exports.units import export_units
from rigside.core.io.atomic import InputClash, WriteError, stale_temporaries
from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.quality.unit_table import COLUMNS
from rigside.core.runs.sort import run_sort
from rigside.core.signal.snippets import snippet_window
from rigside.core.synthetic.synth import write_synth
from rigside.core.units.history import UndoStack
from rigside.core.units.operations import MoveEvents, Relabel
from rigside.core.units.session import load_session, save_session
from rigside.core.units.sorting import NO_UNIT

pynwb = pytest.importorskip("pynwb")   # the nwb extra


EDGE = 3000
"""Samples at either end of the file where the whole-file filter and ours pad differently."""


@pytest.fixture(scope="module")
def sorted_session(tmp_path_factory):
    d = tmp_path_factory.mktemp("nwb")
    write_synth(d / "r.bin", seconds=6, channels=8, seed=4)
    rec = open_recording(d / "r.bin")
    run_sort(rec, Params(), d / "s.h5")
    n_samples = rec.n_samples
    rec.close()
    session = load_session(d / "s.h5")
    first, second = sorted(session.sorting.units)[:2]
    stack = UndoStack(session.sorting)
    # events near the file's ends leave their units (a move to no unit), so that every unit's mean
    # waveform can be compared with the whole-file filter below
    sample = session.events.sample
    edge = np.flatnonzero(((sample < EDGE) | (sample > n_samples - EDGE)) & (session.sorting.assignments >= 0))
    stack.push(MoveEvents(edge, NO_UNIT))
    stack.push(Relabel([first], "single unit"))
    stack.push(Relabel([second], "not neural"))
    save_session(d / "s.h5", session)
    return d


def _open(d):
    session = load_session(d / "s.h5")
    return session, open_recording(session.recording.path)


def _digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_export_passes_the_validator_and_reads_back_as_the_session(sorted_session, tmp_path):
    session, rec = _open(sorted_session)
    out = export_nwb(session, rec, tmp_path / "units.nwb")
    assert pynwb.validate(path=str(out)) == []          # the standard's own check (pynwb.validate)
    export_units(session, tmp_path / "folder")
    rows = list(csv.DictReader(open(tmp_path / "folder" / "unit_times.csv", encoding="utf-8")))
    with pynwb.NWBHDF5IO(str(out), "r") as io:
        nwb = io.read()
        units = nwb.units
        ids = list(units.id[:])
        assert ids == sorted(session.sorting.units)
        for i, u in enumerate(ids):
            from_csv = np.array([float(r["time_s"]) for r in rows if int(r["unit"]) == u])
            np.testing.assert_array_equal(units["spike_times"][i], from_csv)   # exactly the CSV's numbers
            assert units["label"][i] == session.sorting.unit(u).label
        assert {"single unit", "not neural", "unreviewed"} <= set(units["label"][:])
        for c in COLUMNS:
            if c != "unit":
                assert units[c].description == COLUMNS[c]
        assert "y_um" not in units.colnames and "drift_um_per_min" not in units.colnames   # no positions: as before
        assert len(nwb.electrodes) == rec.n_channels
        assert list(nwb.electrodes["group_name"][:]) == [rec.group_names[g] for g in rec.channel_group]
        first = units["electrodes"][0]
        assert list(first.index) == list(rec.groups[session.sorting.unit(ids[0]).group])
        prov = nwb.processing["ecephys"]["sorting_provenance"]
        assert prov["program_version"][0] == __version__
        assert json.loads(prov["parameters"][0]) == session.params.to_dict()
        assert prov["recording_fingerprint"][0] == session.recording.fingerprint
        assert nwb.source_script.startswith("rigside")


def test_mean_waveform_matches_scipy_filtering(sorted_session, tmp_path):
    session, rec = _open(sorted_session)
    out = export_nwb(session, rec, tmp_path / "w.nwb")
    # reference implementation: scipy.signal.sosfiltfilt (float64) over the whole recording, windows
    # cut at each event's peak sample and averaged (every event: the units have fewer than 500)
    from rigside.core.signal.filtering import design_bandpass
    sos = design_bandpass(session.params.filter, rec.rate_hz)
    filtered = signal.sosfiltfilt(sos, rec.read(0, rec.n_samples).astype(np.float64), axis=0)
    before, after = snippet_window(session.params.snippets, rec.rate_hz)
    ev = session.events
    margin = EDGE    # away from the file's ends, where the two paddings differ
    compared = 0
    with pynwb.NWBHDF5IO(str(out), "r") as io:
        units = io.read().units
        for i, u in enumerate(units.id[:]):
            idx = session.sorting.events_of(int(u))
            assert len(idx) < 500
            s = ev.sample[idx]
            if s.min() < margin or s.max() > rec.n_samples - margin:
                continue
            chans = rec.groups[session.sorting.unit(int(u)).group]
            ref = np.mean([filtered[k - before:k + after][:, chans] for k in s], axis=0)
            got = np.asarray(units["waveform_mean"][i]) * 1e6            # volts in the file
            np.testing.assert_allclose(got[:, :len(chans)], ref, atol=1e-3 * filtered.std())
            compared += 1
        assert units.waveform_unit == "volts"
    assert compared >= 3


def test_export_refuses_its_inputs(sorted_session, tmp_path):
    session, rec = _open(sorted_session)
    link = tmp_path / "recording.nwb"
    link.symlink_to(rec.path)
    before = _digest(rec.path)
    with pytest.raises(InputClash):
        export_nwb(session, rec, link)
    hard = sorted_session / "hard.nwb"
    hard.unlink(missing_ok=True)
    hard.hardlink_to(session.source)
    with pytest.raises(InputClash):
        export_nwb(session, rec, hard)
    assert _digest(rec.path) == before and load_session(session.source).sorting.units


def test_a_different_recording_is_refused(sorted_session, tmp_path):
    session, _ = _open(sorted_session)
    write_synth(tmp_path / "other.bin", seconds=5, channels=8, seed=1)
    other = open_recording(tmp_path / "other.bin")
    with pytest.raises(RigsideError, match="recording must be the session's"):
        export_nwb(session, other, tmp_path / "x.nwb")
    assert not (tmp_path / "x.nwb").exists()


def make_nwb_recording(path, rec, spare_rows: int = 2):
    """An NWB file holding ``rec``'s stored samples as an ElectricalSeries over electrodes-table rows
    ``spare_rows..`` (earlier rows belong to another group, so row != channel)."""
    from datetime import datetime, timezone

    from pynwb.ecephys import ElectricalSeries
    nwb = pynwb.NWBFile(session_description="test", identifier="t1",
                        session_start_time=datetime(2026, 1, 2, tzinfo=timezone.utc))
    dev = nwb.create_device(name="amp")
    spare = nwb.create_electrode_group(name="spare", description="unused", location="x", device=dev)
    for _ in range(spare_rows):
        nwb.add_electrode(group=spare, location="x")
    groups = [nwb.create_electrode_group(name=f"wire bundle {i}", description="d", location="x", device=dev)
              for i in range(len(rec.groups))]
    for c in range(rec.n_channels):
        nwb.add_electrode(group=groups[int(rec.channel_group[c])], location="x")
    region = nwb.create_electrode_table_region(list(range(spare_rows, spare_rows + rec.n_channels)), "recorded")
    lay = rec.layout
    nwb.add_acquisition(ElectricalSeries(name="wideband", data=rec.read_stored(0, rec.n_samples), electrodes=region,
                                         rate=rec.rate_hz, conversion=lay.gain_uv * 1e-6,
                                         offset=lay.total_offset_uv * 1e-6))
    with pynwb.NWBHDF5IO(str(path), "w") as io:
        io.write(nwb)
    return path


def test_units_added_to_a_copy_of_an_nwb_recording(sorted_session, tmp_path):
    session, rec = _open(sorted_session)
    base = make_nwb_recording(tmp_path / "rec.nwb", rec)
    before = _digest(base)
    out = export_nwb(session, rec, tmp_path / "with_units.nwb", into_copy=base)
    assert _digest(base) == before                       # the recording itself is untouched
    assert pynwb.validate(path=str(out)) == []           # the standard's own check
    with pynwb.NWBHDF5IO(str(out), "r") as io:
        nwb = io.read()
        np.testing.assert_array_equal(nwb.acquisition["wideband"].data[:], rec.read_stored(0, rec.n_samples))
        units = nwb.units
        assert list(units.id[:]) == sorted(session.sorting.units)
        u0 = int(units.id[0])
        chans = rec.groups[session.sorting.unit(u0).group]
        assert list(units["electrodes"][0].index) == [2 + c for c in chans]   # the series' rows
        assert units["electrode_group"][0].name.startswith("wire bundle")
        assert "sorting_provenance" in nwb.processing["ecephys"].data_interfaces
    with pytest.raises(RigsideError, match="no units table"):
        export_nwb(session, rec, tmp_path / "twice.nwb", into_copy=out)
    assert not (tmp_path / "twice.nwb").exists() and not stale_temporaries(tmp_path / "twice.nwb")
    with pytest.raises(InputClash):
        export_nwb(session, rec, base, into_copy=base)
    assert _digest(base) == before


def test_copy_without_room_is_a_message(sorted_session, tmp_path, monkeypatch):
    session, rec = _open(sorted_session)
    base = make_nwb_recording(tmp_path / "rec.nwb", rec)
    import rigside.core.exports.nwb as nwb_module
    monkeypatch.setattr(nwb_module.shutil, "disk_usage", lambda p: type("U", (), {"free": 1000})())
    with pytest.raises(WriteError, match="MB free"):
        export_nwb(session, rec, tmp_path / "full.nwb", into_copy=base)
    assert not (tmp_path / "full.nwb").exists() and not stale_temporaries(tmp_path / "full.nwb")


def test_without_pynwb_the_export_is_one_message(sorted_session, tmp_path, monkeypatch):
    session, rec = _open(sorted_session)
    monkeypatch.setitem(sys.modules, "pynwb", None)      # import pynwb now fails
    with pytest.raises(RigsideError, match="needs the pynwb package"):
        export_nwb(session, rec, tmp_path / "n.nwb")
    assert not (tmp_path / "n.nwb").exists()


def test_a_new_file_keeps_the_channel_positions_of_the_layout(sorted_session, tmp_path):
    from tests.core.nwb_files import write_nwb
    session, raw = _open(sorted_session)
    x = np.arange(raw.n_channels) * 20.0
    y = np.arange(raw.n_channels)[::-1] * 12.5
    src = write_nwb(tmp_path / "rec.nwb", raw.read_stored(0, raw.n_samples), rate_hz=raw.rate_hz,
                    conversion=raw.layout.gain_uv * 1e-6, groups=[list(map(int, g)) for g in raw.groups],
                    positions=(x, y))
    rec = open_recording(src)
    run_sort(rec, Params(), tmp_path / "s.h5")
    nwb_session = load_session(tmp_path / "s.h5")
    out = export_nwb(nwb_session, rec, tmp_path / "units.nwb")
    assert pynwb.validate(path=str(out)) == []                      # the standard's own check
    with pynwb.NWBHDF5IO(str(out), "r") as io:
        electrodes = io.read().electrodes
        np.testing.assert_array_equal(electrodes["rel_x"][:], x)
        np.testing.assert_array_equal(electrodes["rel_y"][:], y)
    rec.close()
