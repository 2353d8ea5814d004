"""The commands on NWB recordings: the same events as the raw copy of the same data, found at the
planted spikes; bad NWB files are one line and exit 2 (files written with pynwb, invented data)."""

import csv
import re

import numpy as np
import pytest

from rigside.cli.main import main
from rigside.core.events import EventTable
from rigside.core.io.recording import open_recording
from rigside.core.synthetic.synth import GAIN_UV
from rigside.core.synthetic.truth import load_truth, score_curve

pytest.importorskip("pynwb")
from tests.core.nwb_files import write_nwb  # noqa: E402 (needs pynwb)


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    """The demo scenario as raw binary and, sample for sample, as an NWB ElectricalSeries."""
    d = tmp_path_factory.mktemp("nwb")
    assert main(["synth", str(d / "demo.bin"), "--seconds", "12", "--channels", "8", "--seed", "4", "--quiet"]) == 0
    raw = open_recording(d / "demo.bin")
    data = np.fromfile(d / "demo.bin", dtype="<i2").reshape(-1, raw.n_channels)
    groups = [g.tolist() for g in raw.groups]
    x = [float(10 * (c % 2)) for c in range(8)]
    y = [float(20 * (c // 2)) for c in range(8)]
    write_nwb(d / "demo.nwb", data, conversion=GAIN_UV * 1e-6, groups=groups, positions=(x, y), chunks=(30000, 8))
    raw.close()
    return d


def test_detect_on_nwb_gives_the_raw_events_at_the_planted_spikes(pair, capsys):
    d = pair
    assert main(["detect", str(d / "demo.bin"), "--out", str(d / "raw.csv"), "--quiet"]) == 0
    assert main(["detect", str(d / "demo.nwb"), "--out", str(d / "nwb.csv"), "--summary", str(d / "s.json"),
                 "--quiet"]) == 0
    assert (d / "nwb.csv").read_bytes() == (d / "raw.csv").read_bytes()      # exactly the same events
    rows = list(csv.DictReader(open(d / "nwb.csv")))
    assert len(rows) > 100
    # recall at the planted spikes (the scenario's ground truth), strong units as in test_ground_truth
    assert main(["detect", str(d / "demo.nwb"), "--out", str(d / "nwb.h5"), "--quiet"]) == 0
    events = EventTable.read_h5(d / "nwb.h5")
    truth = load_truth(d / "demo.truth.csv")
    strong = [u for u in truth.unit_group if truth.unit_peak_uv[u] >= 5 * events.sigma_uv[truth.unit_peak_channel[u]]]
    assert len(strong) >= 3
    s = score_curve(events, truth, [4.5], units=strong)
    assert s.hits[0] / (s.hits[0] + s.misses[0]) >= 0.95


def test_sort_and_batch_take_nwb_recordings(pair, capsys):
    d = pair
    assert main(["sort", str(d / "demo.nwb"), "--session", str(d / "s.h5"), "--quiet"]) == 0
    assert "units in 2 groups" in capsys.readouterr().out
    assert main(["detect", str(d / "demo.bin"), "--out", str(d / "alone.csv"), "--quiet"]) == 0
    assert main(["batch", str(d / "demo.nwb"), "--out-dir", str(d / "b"), "--quiet"]) == 0
    assert (d / "b" / "demo.events.csv").read_bytes() == (d / "alone.csv").read_bytes()


def several(tmp_path):
    data = np.zeros((4000, 4), dtype=np.int16)
    return write_nwb(tmp_path / "several.nwb", data, series=("probe_a", "probe_b"))


def irregular(tmp_path):
    t = np.arange(4000) / 30000.0
    t[2000:] += 0.01
    return write_nwb(tmp_path / "irregular.nwb", np.zeros((4000, 4), dtype=np.int16), timestamps=t)


def truncated(tmp_path):
    p = write_nwb(tmp_path / "cut.nwb", np.ones((40000, 4), dtype=np.int16))
    p.write_bytes(p.read_bytes()[:-60000])
    return p


def empty(tmp_path):
    p = tmp_path / "empty.nwb"
    p.write_bytes(b"")
    return p


def no_series(tmp_path):
    import datetime

    import pynwb
    nwb = pynwb.NWBFile(session_description="no samples", identifier="x",
                        session_start_time=datetime.datetime(2026, 1, 1, tzinfo=datetime.timezone.utc))
    p = tmp_path / "units_only.nwb"
    with pynwb.NWBHDF5IO(str(p), "w") as io:
        io.write(nwb)
    return p


def garbage(tmp_path):
    p = tmp_path / "garbage.nwb"
    p.write_bytes(b"\x89HDF\r\n\x1a\n" + bytes(range(256)) * 40)
    return p


@pytest.mark.parametrize("make, extra, msg", [
    (several, [], "several ElectricalSeries.*acquisition/probe_a, acquisition/probe_b"),
    (several, ["--series", "probe_c"], "--series must name one"),
    (irregular, [], "evenly spaced"),
    (truncated, [], "NWB|HDF5"),
    (empty, [], "empty"),
    (no_series, [], "must be a recording|ElectricalSeries|2-D dataset"),
    (garbage, [], "HDF5|NWB|raw recording"),
])
def test_bad_nwb_files_are_one_line_exit_2(tmp_path, capsys, make, extra, msg):
    path = make(tmp_path)
    before = path.read_bytes()
    out = tmp_path / "ev.csv"
    assert main(["detect", str(path), "--out", str(out), "--quiet", *extra]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and err.startswith("rigside detect: error:"), err
    assert re.search(msg, err), err
    assert not out.exists() and path.read_bytes() == before


def test_series_chooses_and_is_refused_on_raw_files(pair, tmp_path, capsys):
    path = several(tmp_path)
    assert main(["detect", str(path), "--series", "probe_b", "--out", str(tmp_path / "b.csv"), "--quiet"]) == 0
    assert main(["detect", str(pair / "demo.bin"), "--series", "raw", "--out", str(tmp_path / "r.csv"),
                 "--quiet"]) == 2
    assert "not NWB" in capsys.readouterr().err
    assert main(["detect", str(path), "--series", "probe_a", "--rate", "1000", "--out", str(tmp_path / "c.csv"),
                 "--quiet"]) == 2
    assert "from the file" in capsys.readouterr().err
