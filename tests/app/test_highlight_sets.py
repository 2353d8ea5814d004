"""Highlighted event sets: asking a view again for the sets it shows draws nothing again, and a changed set
(rows or colour) is drawn. Oracle: equality of the rows and colours asked for (common practice, no source)."""

from __future__ import annotations

import numpy as np

from rigside.gui.panels.base import highlight_sets, same_highlights
from tests.app.units_helpers import biggest_unit, cluster_demo


def test_same_highlights_compares_rows_and_colours():
    a = highlight_sets([([1, 2, 3], (10, 20, 30)), ([7], (1, 2, 3))])
    assert same_highlights(a, highlight_sets([(np.array([1, 2, 3]), (10, 20, 30)), ([7], (1, 2, 3))]))
    assert not same_highlights(a, highlight_sets([([1, 2, 3], (10, 20, 31)), ([7], (1, 2, 3))]))
    assert not same_highlights(a, highlight_sets([([1, 2, 4], (10, 20, 30)), ([7], (1, 2, 3))]))
    assert not same_highlights(a, a[:1])
    assert same_highlights([], [])


def test_a_view_asked_again_for_the_same_sets_does_not_redraw(demo_window, monkeypatch):
    win = demo_window
    cluster_demo(win)
    ctl, features, traces = win.units, win.panels["features"], win.panels["traces"]
    ctl.set_selection([biggest_unit(ctl)])
    sets = [(r, ctl.unit_colour(u)) for u, r in ctl.selected_rows().items()]
    drawn = []
    monkeypatch.setattr(features, "_draw", lambda *_: drawn.append("features"))
    monkeypatch.setattr(traces, "_draw_markers", lambda *_: drawn.append("traces"))
    features.highlight(sets)
    traces.highlight(sets)
    assert drawn == []
    other = [(r[: len(r) // 2], c) for r, c in sets]
    features.highlight(other)
    traces.highlight(other)
    assert drawn == ["features", "traces"]
    assert same_highlights(features.highlights, highlight_sets(other))
