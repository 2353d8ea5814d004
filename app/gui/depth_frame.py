"""Adds the drift view to the window: the depth-against-time panel, tabbed with the waveforms and
shown only while the open recording has site positions.

``install_depth(window)`` is the only entry point; it returns the panel's dock.
"""

from __future__ import annotations

from PySide6.QtCore import Qt

from rigside.gui.panels.depth_time import DepthTimePanel


def install_depth(window):
    """Create the depth-against-time panel on ``window``; its dock follows the recording's positions."""
    panel = DepthTimePanel(window.bench, window.runner)
    dock = window.add_panel(panel, Qt.DockWidgetArea.BottomDockWidgetArea, tab_with=window.docks.get("waveforms"))
    dock.hide()

    def follow() -> None:
        rec = window.bench.recording
        probe = rec is not None and rec.positions is not None
        if probe and not dock.isVisible():
            dock.show()
            dock.raise_()
        elif not probe:
            dock.hide()
    window.bench.recording_changed.connect(follow)
    reset = window.actions_by_name.get("reset_layout")
    if reset is not None:              # View > Reset shows every dock: this one again only on a probe
        reset.triggered.connect(follow)
    return dock
