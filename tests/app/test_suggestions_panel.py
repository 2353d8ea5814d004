"""The suggestions panel driven through its real widgets on the clustered demo."""

import numpy as np
from PySide6.QtCore import Qt

from rigside.core.units.dismissals import dismissed_keys
from rigside.gui.screenshot import capture
from tests.app.units_helpers import cluster_demo


def _state(sorting):
    return sorting.assignments.tobytes(), sorting.units, sorting.next_id


def _wait_listed(win, qtbot):
    ctl, units = win.suggestions, win.units
    qtbot.waitUntil(lambda: not win.runner.busy() and ctl.revision == units.sorting.revision, timeout=60000)


def _holder_of_look_alikes(win) -> set[int]:
    """Units holding most of the demo's look-alike pair's spikes (matched within 0.5 ms by sample)."""
    truth, sorting, events = win.bench.analysis.truth, win.units.sorting, win.units.events
    pair = [u for u, kind in truth.unit_kind.items() if kind == "look-alike"]
    tol = int(round(0.0005 * events.rate_hz))
    out = set()
    for u in pair:
        spikes = truth.sample[truth.unit == u]
        i = np.clip(np.searchsorted(events.sample, spikes), 1, len(events.sample) - 1)
        near = np.where(spikes - events.sample[i - 1] < events.sample[i] - spikes, i - 1, i)
        hit = np.abs(events.sample[near] - spikes) <= tol
        ids, counts = np.unique(sorting.assignments[near[hit]], return_counts=True)
        out.add(int(ids[np.argmax(counts)]))
    return out


def _choose(panel, qtbot, row: int) -> None:
    rect = panel.table.visualItemRect(panel.table.item(row, 1))
    qtbot.mouseClick(panel.table.viewport(), Qt.MouseButton.LeftButton, pos=rect.center())


def test_suggestions_are_listed_with_evidence_accepted_rejected_and_undone(demo_window, qtbot, tmp_path):
    win = demo_window
    cluster_demo(win)
    panel, ctl, units = win.panels["suggestions"], win.suggestions, win.units
    assert not ctl.active and ctl.revision == -1          # weighed only once its tab is shown
    win.docks["suggestions"].raise_()
    _wait_listed(win, qtbot)
    assert ctl.active and win.docks["suggestions"].isVisible()
    # the demo's look-alike pair is in the list: as a merge of two units, or as a split of the one holding both
    holders = _holder_of_look_alikes(win)
    assert any(set(s.units) == holders for s in ctl.suggestions), (holders, [s.text for s in ctl.suggestions])
    assert ctl.with_waveforms and ctl.suggestions, ctl.status
    assert panel.table.rowCount() == len(ctl.suggestions)
    assert "score" in panel.table.item(0, 1).toolTip() and panel.table.item(0, 3).text()
    assert not panel.accept_button.isEnabled()
    win.resize(1400, 900)
    image = capture(win.docks["suggestions"], str(tmp_path / "suggestions.png"))
    assert image.width() > 200

    # choosing a row selects its units; Reject remembers it, Undo takes the rejection back
    _choose(panel, qtbot, 0)
    first = ctl.suggestions[0]
    assert units.selection == list(first.units) and panel.reject_button.isEnabled()
    before = _state(units.sorting)
    qtbot.mouseClick(panel.reject_button, Qt.MouseButton.LeftButton)
    _wait_listed(win, qtbot)
    assert _state(units.sorting) == before
    assert first.key in dismissed_keys(units.sorting.journal.entries)
    assert first.key not in {s.key for s in ctl.suggestions}
    units.undo()
    _wait_listed(win, qtbot)
    assert first.key in {s.key for s in ctl.suggestions}

    # Accept does the step; Undo restores the sorting bit for bit
    merge_row = next((i for i, s in enumerate(ctl.suggestions) if s.kind == "merge"), 0)
    _choose(panel, qtbot, merge_row)
    chosen = ctl.suggestions[merge_row]
    before = _state(units.sorting)
    assigned = units.sorting.assignments.copy()
    qtbot.mouseClick(panel.accept_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: _state(units.sorting) != before and not win.runner.busy(), timeout=60000)
    assert units.undo_stack.undoText() == chosen.operation().text
    units.undo()
    assert _state(units.sorting) == before
    assert np.array_equal(units.sorting.assignments, assigned) and units.sorting.assignments.dtype == assigned.dtype
    _wait_listed(win, qtbot)
