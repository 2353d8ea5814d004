"""Event counts in different panels agree, or say why beside the number."""

from __future__ import annotations

import re

from tests.app.units_helpers import cluster_demo


def test_cluster_plane_count_explains_the_artefacts_the_threshold_panel_leaves_out(demo_window):
    win = demo_window
    cluster_demo(win)
    plane = win.unit_panels["plane"]
    g = plane.shown_group()
    win.bench.show_group(g)
    counts = win.bench.counts()
    n_threshold = int(counts[win.bench.group_channels].sum())
    status = plane.status.text()
    m = re.search(r": ([\d,]+) events \(([\d,]+) artefacts kept for sorting, in no unit\)", status)
    assert m, status
    n_plane, n_art = (int(x.replace(",", "")) for x in m.groups())
    s = win.units.sorting
    assert n_art == int(s.data.artefact[s.data.group == g].sum()) > 0
    assert n_plane - n_art == n_threshold
