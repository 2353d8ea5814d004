"""CSV outputs carrying user text: no line break can start a row or a comment line, and text
cells that a spreadsheet would run as a formula are neutralised (common practice, no source:
a leading single quote); number columns are written unchanged."""

import csv

import numpy as np

from rigside.core.quality.unit_table_io import safe_text, write_described_csv
from rigside.core.runs.batch import BatchOutcome, write_outcomes

HOSTILE = ['=HYPERLINK("http://x","y")', "+1+2", "-2+3", "@SUM(A1)", "two\nlines\r\n0,0,0", "plain"]


def _rows(path):
    lines = open(path, newline="", encoding="utf-8").read()
    body = [line for line in lines.splitlines(keepends=True) if not line.startswith("#")]
    return lines, list(csv.reader("".join(body).splitlines(keepends=True)))


def test_described_csv_keeps_text_in_its_cells(tmp_path):
    table = {"unit": np.arange(len(HOSTILE)), "value": -np.arange(len(HOSTILE)) - 0.5,
             "note": np.array(HOSTILE, dtype=object)}
    p = write_described_csv(tmp_path / "t.csv", ["title", "imported: evil\n1,2,3.csv"],
                            {"unit": "id", "value": "a number\nwith a break", "note": "text"},
                            ["unit", "value", "note"], table,
                            lambda c, v: str(v), text_columns=["note"])
    text, rows = _rows(p)
    comments = [line for line in text.splitlines() if line.startswith("#")]
    assert comments[1] == "# imported: evil\\n1,2,3.csv" and comments[3] == "# value: a number\\nwith a break"
    assert rows[0] == ["unit", "value", "note"] and len(rows) == 1 + len(HOSTILE)
    assert [r[0] for r in rows[1:]] == [str(i) for i in range(len(HOSTILE))]
    assert [r[1] for r in rows[1:]] == [str(-i - 0.5) for i in range(len(HOSTILE))]   # numbers untouched
    assert [r[2] for r in rows[1:]] == ["'" + h for h in HOSTILE[:4]] + [HOSTILE[4], "plain"]


def test_batch_table_neutralises_file_names_and_messages(tmp_path):
    outcomes = [BatchOutcome("=cmd|' /C calc'!A0.bin", "failed", 0, 0.0, 0.1, "-bad\nrow,injected"),
                BatchOutcome("a\nb.bin", "done", 12, 3.0, 0.5)]
    p = write_outcomes(tmp_path / "batch.csv", outcomes)
    _, rows = _rows(p)
    assert len(rows) == 3
    assert rows[1][0] == "'=cmd|' /C calc'!A0.bin" and rows[1][5] == "'-bad\nrow,injected"
    assert rows[2][:3] == ["a\nb.bin", "done", "12"]


def test_safe_text_leaves_ordinary_text():
    assert safe_text("single unit") == "single unit" and safe_text("") == "" and safe_text(3) == "3"
