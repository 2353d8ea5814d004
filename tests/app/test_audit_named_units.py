"""An imported sorting whose units are named (tt3_u2, elec12a, ...): the names are kept in the
window's audit table, its pair view, the trace rows and the exports, in natural order."""

from __future__ import annotations

import csv

from rigside.core.io.spike_import import natural_key
from rigside.gui.panels.audit_pair import TRACE_KEY
from tests.app.test_audit_view import old_sorting, wait_audit
from tests.app.units_helpers import cluster_demo


def unit_name(u: int) -> str:
    """Invented names: tt1_u2 ... tt11_u2 (natural order differs from the text's) and elec12a."""
    return "elec12a" if u == 11 else f"tt{u + 1}_u2"


def named_sorting(tmp_path) -> tuple:
    path, counts = old_sorting(tmp_path, "numbers.csv")
    rows = list(csv.reader(open(path)))
    named = tmp_path / "named.csv"
    with open(named, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(rows[0])
        for u, t in rows[1:]:
            w.writerow([unit_name(int(u)), t])
    return named, {unit_name(u): n for u, n in counts.items()}


def test_named_units_keep_their_names_everywhere(demo_window, qtbot, tmp_path):
    win = demo_window
    cluster_demo(win)
    path, counts = named_sorting(tmp_path)
    assert win.audit.start(path)
    wait_audit(win, qtbot)
    r = win.audit.result
    assert r is not None, win.last_error
    panel = win.audit_panel
    shown = [panel.table.item(i, 0).text() for i in range(panel.table.rowCount())]
    assert shown == sorted(counts, key=natural_key)                  # as given, in natural order
    assert shown[:3] == ["elec12a", "tt1_u2", "tt2_u2"] and shown.index("tt10_u2") > shown.index("tt9_u2")
    spikes_col = 1
    assert {panel.table.item(i, 0).text(): int(panel.table.item(i, spikes_col).text())
            for i in range(panel.table.rowCount())} == counts

    code = r.spikes.names.index("tt10_u2")
    panel.select_unit(code)
    qtbot.waitUntil(lambda: win.audit.pair is not None and win.audit.pair.imported.unit == code, timeout=30000)
    assert win.wait_idle(30)
    assert "Imported unit tt10_u2" in panel.plots.header.text()
    assert "imported unit tt10_u2" in panel.plots.key.text()
    labels = [label for _, label in win.traces.rows.ticks()]
    assert labels[0] == "imported tt10_u2" and win.traces.rows.drawn(TRACE_KEY)

    assert win.audit.export("table", tmp_path / "audit.csv")
    assert win.audit.export("report", tmp_path / "audit.html")
    assert win.wait_idle(60)
    lines = [ln for ln in (tmp_path / "audit.csv").read_text().splitlines() if not ln.startswith("#")]
    table = list(csv.DictReader(lines))
    assert [row["unit"] for row in table] == sorted(counts, key=natural_key)
    assert {row["unit"]: int(row["n_spikes"]) for row in table} == counts
    report = (tmp_path / "audit.html").read_text()
    for name in counts:
        assert f">{name}</a>" in report and f"Imported unit {name} (" in report
