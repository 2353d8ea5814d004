"""Status-bar widget: what long work is running, how far it is, and a cancel button."""

from __future__ import annotations

from PySide6.QtWidgets import QHBoxLayout, QLabel, QProgressBar, QPushButton, QWidget

from rigside.gui.workers import Runner


class TaskStatus(QWidget):
    def __init__(self, runner: Runner, parent: QWidget | None = None):
        super().__init__(parent)
        self.runner = runner
        self.label = QLabel("")
        self.bar = QProgressBar()
        self.bar.setRange(0, 1000)
        self.bar.setFixedWidth(220)
        self.bar.setTextVisible(True)
        self.cancel_button = QPushButton("Cancel")
        self.cancel_button.setToolTip("Stop the running work (Esc)")
        self.cancel_button.clicked.connect(lambda: runner.cancel())
        lay = QHBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.label)
        lay.addWidget(self.bar)
        lay.addWidget(self.cancel_button)
        # The status bar keeps one height whether work runs or not (one that grew when work
        # starts would move every panel and repaint the whole window): the bar and the button
        # are no taller than a line of text, and keep their room while hidden.
        line = self.label.sizeHint().height() + 3
        for w in (self.bar, self.cancel_button):
            w.setMaximumHeight(line)
            policy = w.sizePolicy()
            policy.setRetainSizeWhenHidden(True)
            w.setSizePolicy(policy)
        runner.started.connect(self._on_started)
        runner.progressed.connect(self._on_progress)
        runner.idle.connect(self._on_idle)
        self._on_idle()

    def _on_started(self, label: str) -> None:
        self.label.setText(label + "…")
        self.bar.setValue(0)
        self.bar.setFormat("%p%")
        for w in (self.label, self.bar, self.cancel_button):
            w.setVisible(True)

    def _on_progress(self, label: str, fraction: float, message: str) -> None:
        self.label.setText(f"{label}: {message}" if message else label)
        self.bar.setValue(int(fraction * 1000))

    def _on_idle(self) -> None:
        for w in (self.label, self.bar, self.cancel_button):
            w.setVisible(False)
