"""Make the practice screenshots of the README with the program itself (run from the repository root):

    QT_QPA_PLATFORM=offscreen python docs/practice_screenshots.py

It writes a practice recording into a temporary folder (the settings below, as
`rigside synth practice.bin --seconds 30 --snr 3 9 --seed 3`), opens it in the window, and saves the
dialog, the window with the trade-off view and a practice summary into docs/screenshots/.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

from PySide6.QtWidgets import QApplication

from rigside.core.synthetic.settings import SynthSettings
from rigside.core.synthetic.synth import write_practice
from rigside.gui.dialogs.practice import PracticeDialog
from rigside.gui.screenshot import capture
from rigside.gui.window import MainWindow

OUT = Path(__file__).resolve().parent / "screenshots"
SETTINGS = SynthSettings(seconds=30.0, snr=(3.0, 9.0), seed=3)


def main() -> None:
    app = QApplication.instance() or QApplication([])
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "practice.bin"
        write_practice(path, SETTINGS)
        win = MainWindow(interactive=False)
        win.show()
        dialog = PracticeDialog(folder, win, SETTINGS)
        dialog.name.setText("lesson2")
        dialog.show()
        capture(dialog, str(OUT / "practice_dialog.png"))
        dialog.close()
        win.open_path(str(path))
        win.wait_idle()
        win.bench.show_group(1)
        win.wait_idle()
        win.bench.set_threshold(4.0, scale="sigma")
        win.wait_idle()
        capture(win, str(OUT / "practice_tradeoff.png"))
        win.practice.save(OUT / "practice_summary.png")
        (OUT / "practice_summary.csv").unlink()
        (OUT / "practice_summary.settings.toml").unlink()
        win.close()
    app.processEvents()


if __name__ == "__main__":
    main()
