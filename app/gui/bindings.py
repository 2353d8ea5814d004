"""Two-way bindings between a model value and one control.

The control writes the model on a user edit; a model signal updates the control inside a
signal blocker, so the two never echo each other. Each binding keeps itself alive by
being a child of its control.
"""

from __future__ import annotations

import math
from typing import Any, Callable, Sequence

from PySide6.QtCore import QObject, QSignalBlocker
from PySide6.QtWidgets import QAbstractButton, QComboBox, QDoubleSpinBox

from rigside.core.notify import Signal


class _Binding(QObject):
    def __init__(self, control, read: Callable[[], Any], write: Callable[[Any], None],
                 signals: Sequence[Signal]):
        super().__init__(control)
        self.control = control
        self._read = read
        self._write = write
        for s in signals:
            s.connect(self.refresh)
        self.refresh()

    def refresh(self, *_: Any) -> None:
        with QSignalBlocker(self.control):
            self._show(self._read())

    def _show(self, value: Any) -> None:
        raise NotImplementedError


class SpinBinding(_Binding):
    """A QDoubleSpinBox bound to a float (NaN shows as empty and disables the box)."""

    def __init__(self, spin: QDoubleSpinBox, read, write, signals):
        super().__init__(spin, read, write, signals)
        spin.valueChanged.connect(self._edited)

    def _show(self, value: float) -> None:
        ok = value is not None and math.isfinite(value)
        self.control.setEnabled(ok)
        if ok:
            self.control.setValue(value)

    def _edited(self, value: float) -> None:
        self._write(float(value))


class ComboBinding(_Binding):
    """A QComboBox whose item data are the model's values."""

    def __init__(self, combo: QComboBox, read, write, signals):
        super().__init__(combo, read, write, signals)
        combo.currentIndexChanged.connect(self._edited)

    def _show(self, value: Any) -> None:
        i = self.control.findData(value)
        if i >= 0:
            self.control.setCurrentIndex(i)

    def _edited(self, index: int) -> None:
        self._write(self.control.itemData(index))


class CheckBinding(_Binding):
    """A checkable button (or action-backed tool button) bound to a bool."""

    def __init__(self, button: QAbstractButton, read, write, signals):
        super().__init__(button, read, write, signals)
        button.toggled.connect(self._edited)

    def _show(self, value: bool) -> None:
        self.control.setChecked(bool(value))

    def _edited(self, checked: bool) -> None:
        self._write(bool(checked))
