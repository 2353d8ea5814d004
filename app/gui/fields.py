"""Number fields the dialogs and panels share."""

from __future__ import annotations

from PySide6.QtWidgets import QDoubleSpinBox


def double_spin(value: float, low: float, high: float, decimals: int = 1, suffix: str = "", tip: str = "",
                step: float = 1.0) -> QDoubleSpinBox:
    """A number field with its range, decimals, unit suffix, tool tip and step."""
    s = QDoubleSpinBox()
    s.setRange(low, high)
    s.setDecimals(decimals)
    s.setSingleStep(step)
    s.setValue(value)
    s.setSuffix(suffix)
    if tip:
        s.setToolTip(tip)
    return s
