"""Where the window keeps recent files, folders and its layout between runs."""

from __future__ import annotations

from PySide6.QtCore import QSettings


def settings() -> QSettings:
    """The window's settings file (tests point QSettings elsewhere)."""
    return QSettings(QSettings.Format.IniFormat, QSettings.Scope.UserScope, "rigside", "workbench")
