"""Adds the suggestions panel to the window, a tab beside the unit list, shown once there is a sorting.

``install_suggestions(window, units)`` is the only entry point (called by
:func:`app.units_frame.install_units`); it sets ``window.suggestions`` (the
:class:`~app.suggestions_controller.SuggestionsController`).
"""

from __future__ import annotations

from PySide6.QtCore import Qt

from rigside.gui.panels.suggestions import SuggestionsPanel
from rigside.gui.suggestions_controller import SuggestionsController


def install_suggestions(window, units) -> SuggestionsController:
    """Create the controller and its panel, in a dock tabbed with the unit list's."""
    ctl = SuggestionsController(window, units)
    window.suggestions = ctl
    panel = SuggestionsPanel(window.bench, window.runner, ctl, units)
    dock = window.add_panel(panel, Qt.DockWidgetArea.RightDockWidgetArea, tab_with=window.docks.get("unit_list"))

    dock.visibilityChanged.connect(ctl.set_active)

    def show_with_units() -> None:
        if units.sorting is not None and not dock.isVisible():
            dock.show()
    units.sorting_replaced.connect(show_with_units)
    return ctl
