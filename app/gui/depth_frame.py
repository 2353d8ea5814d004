"""Adds the probe views to the window, each shown only while the open recording has site positions:
the depth-against-time panel (tabbed with the waveforms) and the probe map ("Sites", left of the traces:
sites, unit positions, the selected unit's footprint).

``install_depth(window)`` is the only entry point; it returns the depth panel's dock (the map's is
``window.docks["sites"]``).
"""

from __future__ import annotations

from PySide6.QtCore import Qt

from rigside.gui.panels.depth_time import DepthTimePanel
from rigside.gui.panels.sites import SitesPanel

SITES_WIDTH = 260
"""Width (pixels) the probe map is first shown at."""
SESSION_SITES_SHARE = 0.18
"""Share of the window's width the probe map takes when a probe session's units are first shown."""
SESSION_PLOTS_SHARE = 0.47
"""Share of the window's height the unit plots then take (less than on bundles: the map and the traces above
them get the room a probe's many sites need)."""


def install_depth(window):
    """Create the probe panels on ``window``; their docks follow the recording's positions."""
    panel = DepthTimePanel(window.bench, window.runner)
    dock = window.add_panel(panel, Qt.DockWidgetArea.BottomDockWidgetArea, tab_with=window.docks.get("waveforms"))
    sites = window.add_panel(SitesPanel(window.bench, window.runner, window.units),
                             Qt.DockWidgetArea.LeftDockWidgetArea)
    window.resizeDocks([sites], [SITES_WIDTH], Qt.Orientation.Horizontal)
    for d in (dock, sites):
        d.hide()

    def follow() -> None:
        rec = window.bench.recording
        probe = rec is not None and rec.positions is not None
        for d in (dock, sites):
            if probe and not d.isVisible():
                d.show()
                d.raise_()
            elif not probe:
                d.hide()
    window.bench.recording_changed.connect(follow)
    arranged: set[str] = set()

    def room_for_the_map() -> None:
        """The first time a probe session's units are shown (after the unit docks took their sizes)."""
        rec = window.bench.recording
        if "done" in arranged or window.units.sorting is None or rec is None or rec.positions is None:
            return
        arranged.add("done")
        window.resizeDocks([sites], [int(SESSION_SITES_SHARE * window.width())], Qt.Orientation.Horizontal)
        window.resizeDocks([window.docks["unit_plots"]], [int(SESSION_PLOTS_SHARE * window.height())],
                           Qt.Orientation.Vertical)
    window.units.sorting_replaced.connect(room_for_the_map)
    reset = window.actions_by_name.get("reset_layout")
    if reset is not None:              # View > Reset shows every dock: these again only on a probe
        reset.triggered.connect(follow)
    return dock
