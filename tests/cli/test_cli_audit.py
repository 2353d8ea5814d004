"""`rigside audit`: report and table from a CSV of earlier spike times, with and without a
session; bad inputs give exit code 2 and write nothing (invented data, rigside.core.synthetic.synth)."""

import csv

import h5py
import numpy as np
import pytest

from rigside.cli.main import main
from rigside.core.synthetic.truth import load_truth


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    d = tmp_path_factory.mktemp("audit_cli")
    assert main(["synth", str(d / "rec.bin"), "--seconds", "8", "--channels", "8", "--seed", "4", "--quiet"]) == 0
    truth = load_truth(d / "rec.truth.csv")
    inside = truth.sample < 8 * 30000          # bursts may run past the end of the file
    truth.sample, truth.unit = truth.sample[inside], truth.unit[inside]
    with open(d / "old.csv", "w") as fh:
        fh.write("unit,sample\n")
        for u, s in zip(truth.unit, truth.sample):
            fh.write(f"{u},{s}\n")
    return d, truth


def table_rows(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(line for line in fh if not line.startswith("#")))


def test_audit_against_first_pass(demo, capsys):
    d, truth = demo
    out, table = d / "r.html", d / "a.csv"
    assert main(["audit", str(d / "rec.bin"), "--sorted", str(d / "old.csv"), "--out", str(out),
                 "--table", str(table), "--quiet"]) == 0
    rows = table_rows(table)
    assert [int(r["unit"]) for r in rows] == sorted(set(truth.unit.tolist()))
    for r in rows:
        assert int(r["n_spikes"]) == int(np.sum(truth.unit == int(r["unit"])))
        for c in ("matched_fraction", "closest_fresh_unit", "false_positive_estimate", "miss_estimate",
                  "contamination", "isolation_distance", "snr"):
            assert c in r
    # the true trains themselves: most spikes of every unit are backed by detected events
    assert np.median([float(r["matched_fraction"]) for r in rows]) > 0.9
    html = out.read_text(encoding="utf-8")
    assert html.startswith("<!DOCTYPE html>") and html.count("<svg") >= 3 * len(rows)
    assert "audited against" in capsys.readouterr().out


def test_audit_against_session(demo):
    d, truth = demo
    session = d / "s.h5"
    assert main(["sort", str(d / "rec.bin"), "--session", str(session), "--quiet"]) == 0
    out, table = d / "rs.html", d / "as.csv"
    assert main(["audit", str(d / "rec.bin"), "--sorted", str(d / "old.csv"), "--session", str(session),
                 "--out", str(out), "--table", str(table), "--quiet"]) == 0
    assert "session s.h5" in out.read_text(encoding="utf-8")
    assert len(table_rows(table)) == len(set(truth.unit.tolist()))
    # the session brings its own detection parameters
    assert main(["audit", str(d / "rec.bin"), "--sorted", str(d / "old.csv"), "--session", str(session),
                 "--out", str(d / "x.html"), "--table", str(d / "x.csv"), "--threshold", "5", "--quiet"]) == 2
    assert not (d / "x.html").exists() and not (d / "x.csv").exists()


@pytest.mark.parametrize("name,content,message", [
    ("late.csv", "unit,time_s\n1,0.5\n1,9.5\n", "within the recording"),
    ("ms.csv", "unit,time_s\n1,500\n1,7900\n", "look like milliseconds"),
    ("unsorted.csv", "unit,time_s\n1,0.5\n1,0.4\n", "sorted in time"),
    ("mixed.csv", "unit,time_s,sample\n1,0.5,15000\n", "mixed units of time"),
    ("empty.csv", "", "empty file"),
    ("bad.npy", b"\x93NUMPY garbage", "NumPy array file"),
    ("hostile.h5", None, "stored in the file itself"),
])
def test_bad_spike_files_exit_2_and_write_nothing(demo, capsys, name, content, message):
    d, _ = demo
    path = d / name
    if content is None:
        with h5py.File(path, "w") as f:
            f["unit"] = h5py.ExternalLink("elsewhere.h5", "/unit")
            f["time_s"] = [0.1]
    elif isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content)
    out, table = d / f"{name}.html", d / f"{name}.csv"
    assert main(["audit", str(d / "rec.bin"), "--sorted", str(path), "--out", str(out), "--table", str(table),
                 "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("rigside audit: error:") and message in err
    assert not out.exists() and not table.exists()


def test_output_checks(demo):
    d, _ = demo
    base = ["audit", str(d / "rec.bin"), "--sorted", str(d / "old.csv"), "--quiet"]
    assert main(base + ["--out", str(d / "r.txt"), "--table", str(d / "t.csv")]) == 2
    assert main(base + ["--out", str(d / "same.html"), "--table", str(d / "old.csv")]) == 2
    assert main(base + ["--out", str(d / "r.html"), "--table", str(d / "t.csv"), "--tolerance-ms", "-1"]) == 2
    assert main(base + ["--out", str(d / "r.html"), "--table", str(d / "nowhere" / "t.csv")]) == 2
