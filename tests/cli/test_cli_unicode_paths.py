"""Every command on paths with spaces and non-ASCII letters (a folder "réc données ü", files
"séance 1.bin" and "séance 1.h5"): inputs are found, outputs land under the names given, and the
names written inside outputs come back unchanged. Common practice, no source."""

import csv
import json

import pytest

from rigside.cli.main import main
from rigside.core.units.session import load_session


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    d = tmp_path_factory.mktemp("paths") / "réc données ü"
    d.mkdir()
    rec = d / "séance 1.bin"
    assert main(["synth", str(rec), "--seconds", "6", "--channels", "4", "--seed", "5", "--quiet"]) == 0
    return d


def read_rows(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(line for line in fh if not line.startswith("#")))


def test_synth_writes_beside_the_given_name(folder):
    names = {p.name for p in folder.iterdir()}
    assert {"séance 1.bin", "séance 1.rigside.toml", "séance 1.truth.csv", "séance 1.truth_units.csv"} <= names


def test_detect_sort_metrics_export_on_such_paths(folder):
    rec, session = folder / "séance 1.bin", folder / "séance 1.h5"
    events, summary = folder / "évènements ü.csv", folder / "résumé 1.json"
    assert main(["detect", str(rec), "--out", str(events), "--summary", str(summary), "--quiet"]) == 0
    doc = json.loads(summary.read_text(encoding="utf-8"))
    assert len(read_rows(events)) == sum(c["events"] for c in doc["channels"]) > 0
    assert main(["sort", str(rec), "--session", str(session), "--quiet"]) == 0
    loaded = load_session(session)
    assert loaded.sorting.unit_ids()
    metrics = folder / "qualité 1.csv"
    assert main(["metrics", str(session), "--out", str(metrics), "--quiet"]) == 0
    assert {int(r["unit"]) for r in read_rows(metrics)} == set(loaded.sorting.unit_ids())
    out = folder / "export é"
    assert main(["export", str(session), "--out", str(out), "--quiet"]) == 0
    assert any(out.iterdir())


def test_audit_on_such_paths(folder):
    rec, old = folder / "séance 1.bin", folder / "tri ancien ü.csv"
    truth = read_rows(folder / "séance 1.truth.csv")
    with open(old, "w", newline="", encoding="utf-8") as fh:
        fh.write("unit,sample\n")
        fh.writelines(f"{r['unit']},{r['sample']}\n" for r in truth if int(r["sample"]) < 6 * 30000)
    report, table = folder / "rapport é.html", folder / "audit é.csv"
    assert main(["audit", str(rec), "--sorted", str(old), "--out", str(report), "--table", str(table),
                 "--quiet"]) == 0
    assert report.read_text(encoding="utf-8").lstrip().lower().startswith("<!doctype html")
    assert len(read_rows(table)) == len({r["unit"] for r in truth})


def test_batch_on_such_paths(folder):
    out = folder / "lot données"
    assert main(["batch", str(folder / "séance 1.bin"), "--out-dir", str(out), "--quiet"]) == 0
    rows = read_rows(out / "batch.csv")
    assert [r["status"] for r in rows] == ["done"]
    assert rows[0]["recording"].endswith("séance 1.bin")
    assert (out / "séance 1.events.csv").exists()
