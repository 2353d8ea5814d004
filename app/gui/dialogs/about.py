"""About rigside, with the cautions every user must see."""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QMessageBox, QWidget

CAUTIONS = (
    "<p><b>A research tool.</b> rigside is not for diagnosis or for any decision about a patient.</p>"
    "<p><b>Recordings from people</b> are handled under the lab's ethics approval and local "
    "data-protection rules.</p>"
    "<p><b>Quality numbers are estimates</b> built on assumptions (Gaussian noise and clusters, a "
    "refractory period, a stationary recording). Expected noise-only rates assume Gaussian noise "
    "through the filter used; a &ldquo;single unit&rdquo; label is a claim, not a fact.</p>"
)


def about_text(version: str) -> str:
    return (f"<h3>rigside {version}</h3>"
            "<p>From raw extracellular voltage recordings to curated, quality-scored spike trains.</p>"
            + CAUTIONS)


def show_about(parent: QWidget, version: str) -> QMessageBox:
    box = QMessageBox(parent)
    box.setWindowTitle("About rigside")
    box.setTextFormat(Qt.TextFormat.RichText)
    box.setText(about_text(version))
    box.setIcon(QMessageBox.Icon.Information)
    box.open()
    return box
