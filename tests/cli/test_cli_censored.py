"""One censored-period rule: `metrics` and `audit` give the same unit the same contamination,
and every output states the period used."""

import csv

import numpy as np
import pytest

from rigside.cli.main import main
from rigside.core.units.session import load_session


def rows_and_comments(path):
    with open(path, newline="") as fh:
        lines = fh.read().splitlines()
    comments = [line for line in lines if line.startswith("#")]
    return list(csv.DictReader(line for line in lines if not line.startswith("#"))), comments


def test_metrics_and_audit_agree_on_contamination(tmp_path, capsys):
    d = tmp_path
    assert main(["synth", str(d / "rec.bin"), "--seconds", "6", "--channels", "8", "--seed", "4", "--quiet"]) == 0
    assert main(["sort", str(d / "rec.bin"), "--session", str(d / "s.h5"), "--quiet"]) == 0
    s = load_session(d / "s.h5")
    keep = s.sorting.assignments >= 0
    with open(d / "own.csv", "w") as fh:       # the session's own units, imported back
        fh.write("unit,sample\n")
        for u, smp in zip(s.sorting.assignments[keep], s.events.sample[keep]):
            fh.write(f"{u},{smp}\n")
    assert main(["metrics", str(d / "s.h5"), "--out", str(d / "m.csv"), "--quiet"]) == 0
    assert "censored period 1 ms (the detection dead time unless set)" in capsys.readouterr().out
    assert main(["audit", str(d / "rec.bin"), "--sorted", str(d / "own.csv"), "--session", str(d / "s.h5"),
                 "--out", str(d / "r.html"), "--table", str(d / "a.csv"), "--quiet"]) == 0
    metrics, m_comments = rows_and_comments(d / "m.csv")
    audit, a_comments = rows_and_comments(d / "a.csv")
    by_unit = {r["unit"]: r for r in metrics}
    compared = 0
    for r in audit:
        c_audit, c_metrics = float(r["contamination"]), float(by_unit[r["unit"]]["contamination"])
        if np.isfinite(c_metrics):
            assert c_audit == pytest.approx(c_metrics, rel=1e-4), r["unit"]
            compared += 1
    assert compared >= 2
    note = "censored period 1 ms (the detection dead time unless set)"
    assert any(note in c for c in m_comments) and any(note in c for c in a_comments)
    assert note in (d / "r.html").read_text(encoding="utf-8")
    # numbers a person reads carry no exponent (the CSV data columns keep full precision)
    import re
    text = re.sub(r"<svg.*?</svg>", "", (d / "r.html").read_text(encoding="utf-8"), flags=re.S)
    assert not re.search(r"\d(\.\d+)?e[-+]\d", text)
