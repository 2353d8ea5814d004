"""Probe recordings on the command line: synth --probe, --positions, --radius-um."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from rigside.cli.main import build_parser, main
from tests.core.helpers import gaussian


@pytest.fixture(scope="module")
def probe(tmp_path_factory):
    d = tmp_path_factory.mktemp("probe")
    assert main(["synth", str(d / "p.bin"), "--probe", "--sites", "32", "--shanks", "2", "--pitch-um", "25",
                 "--drift-um", "10", "--seconds", "2", "--quiet"]) == 0
    return d


def test_synth_probe_writes_positions_and_truth(probe, capsys):
    meta = (probe / "p.rigside.toml").read_text()
    assert "[probe]" in meta and "shank" in meta
    rows = list(csv.DictReader(open(probe / "p.truth_units.csv")))
    assert rows and {"x_um", "y_um", "shank", "drift_um"} <= set(rows[0]) and rows[0]["drift_um"] == "10"


def test_detect_on_a_probe_writes_event_positions_and_the_radius(probe):
    out, summary = probe / "ev.csv", probe / "s.json"
    assert main(["detect", str(probe / "p.bin"), "--out", str(out), "--summary", str(summary),
                 "--radius-um", "40", "--quiet"]) == 0
    rows = list(csv.DictReader(open(out)))
    assert rows and list(rows[0])[-2:] == ["x_um", "y_um"]
    doc = json.load(open(summary))
    assert doc["parameters"]["probe"]["radius_um"] == 40.0 and len(doc["recording"]["x_um"]) == 32
    assert doc["recording"]["group_names"] == ["shank 0", "shank 1"]


def test_positions_file_turns_a_bundle_recording_into_a_probe(tmp_path):
    rec = tmp_path / "r.dat"
    gaussian(30000, 4, sigma=20.0).astype(np.int16).tofile(rec)
    sites = tmp_path / "sites.csv"
    sites.write_text("channel,x_um,y_um\n0,0,0\n1,0,20\n2,0,40\n3,0,60\n")
    out = tmp_path / "ev.csv"
    assert main(["detect", str(rec), "--channels", "4", "--rate", "30000", "--positions", str(sites),
                 "--out", str(out), "--quiet"]) == 0
    assert open(out).readline().strip().endswith("x_um,y_um")


def test_bad_positions_file_is_one_line_and_exit_2(tmp_path, capsys):
    rec = tmp_path / "r.dat"
    gaussian(3000, 4).astype(np.int16).tofile(rec)
    sites = tmp_path / "sites.csv"
    sites.write_text("channel,x_um,y_um\n0,0,0\n1,0,20\n")
    code = main(["detect", str(rec), "--channels", "4", "--rate", "30000", "--positions", str(sites),
                 "--out", str(tmp_path / "ev.csv"), "--quiet"])
    err = capsys.readouterr().err.strip()
    assert code == 2 and "\n" not in err and "one row per channel (4), got 2" in err
    assert not (tmp_path / "ev.csv").exists()


def test_positions_file_is_an_input_the_command_never_writes(tmp_path, capsys):
    rec = tmp_path / "r.dat"
    gaussian(3000, 4).astype(np.int16).tofile(rec)
    sites = tmp_path / "sites.csv"
    text = "channel,x_um,y_um\n0,0,0\n1,0,20\n2,0,40\n3,0,60\n"
    sites.write_text(text)
    code = main(["detect", str(rec), "--channels", "4", "--rate", "30000", "--positions", str(sites),
                 "--out", str(sites), "--quiet"])
    assert code == 2 and sites.read_text() == text


@pytest.mark.parametrize("argv, message", [
    (["--sites", "32"], "must come with --probe"),
    (["--probe", "--sites", "33"], "multiple of shanks x columns"),
    (["--probe", "--pitch-um", "0"], "pitch must be between 1 and 1000 um"),
    (["--probe", "--drift-um", "5000"], "drift must be at most 1000 um"),
])
def test_bad_probe_options_are_refused(tmp_path, capsys, argv, message):
    assert main(["synth", str(tmp_path / "x.bin"), "--quiet", *argv]) == 2
    assert message in capsys.readouterr().err
    assert not (tmp_path / "x.bin").exists()


@pytest.mark.parametrize("command", ["detect", "sort", "batch", "audit", "open"])
def test_every_recording_command_takes_positions(command):
    args = {"detect": ["detect", "r.bin", "--out", "e.csv"], "sort": ["sort", "r.bin", "--session", "s.h5"],
            "batch": ["batch", "r.bin", "--out", "o"],
            "audit": ["audit", "r.bin", "--sorted", "t.csv", "--out", "a.html", "--table", "a.csv"],
            "open": ["open", "r.bin"]}[command]
    parsed = build_parser(command).parse_args([*args, "--positions", "sites.csv"])
    assert parsed.positions == "sites.csv"


def test_sorted_probe_units_carry_position_and_drift_into_metrics_and_exports(probe):
    """The probe's units through sort, metrics and both exports: the position columns (after the
    bundle columns in the metrics CSV; described extra columns of the NWB units table, checked by the
    standard's validator, pynwb.validate) hold the same numbers everywhere."""
    from rigside.core.quality.unit_position import POSITION_COLUMNS
    from rigside.core.quality.unit_table import COLUMNS

    session, metrics = probe / "s.rigside.h5", probe / "m.csv"
    assert main(["sort", str(probe / "p.bin"), "--session", str(session), "--quiet"]) == 0
    assert main(["metrics", str(session), "--out", str(metrics), "--quiet"]) == 0
    lines = metrics.read_text().splitlines()
    rows = list(csv.DictReader(ln for ln in lines if not ln.startswith("#")))
    assert rows and list(rows[0])[:len(COLUMNS) + len(POSITION_COLUMNS)] == [*COLUMNS, *POSITION_COLUMNS]
    assert all(0 <= float(r["y_um"]) <= 175 and r["drift_um_per_min"] != "" for r in rows)   # 8 rows of 25 um
    assert main(["export", str(session), "--out", str(probe / "folder"), "--quiet"]) == 0
    listed = json.loads((probe / "folder" / "export.json").read_text())["units"]
    assert [e["y_um"] for e in listed] == pytest.approx([float(r["y_um"]) for r in rows], abs=0.006)
    pynwb = pytest.importorskip("pynwb")
    assert main(["export", str(session), "--nwb", str(probe / "u.nwb"), "--quiet"]) == 0
    assert pynwb.validate(path=str(probe / "u.nwb")) == []
    with pynwb.NWBHDF5IO(str(probe / "u.nwb"), "r") as io:
        units = io.read().units
        for c, meaning in POSITION_COLUMNS.items():
            assert units[c].description == meaning
        np.testing.assert_allclose(units["y_um"][:], [float(r["y_um"]) for r in rows], rtol=1e-5)
        assert list(units["drift_reason"][:]) == [r["drift_reason"] for r in rows]
