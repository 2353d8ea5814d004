"""Make the README's window screenshots of units and of an audit with the program itself.

    python docs/make_screenshots.py [OUT_DIR]          (default: docs/screenshots beside this file)

The window is driven offscreen on the bundled demo, as a user would drive it: detection, the first
pass (Units > Cluster), the two largest units of the shown bundle selected, then an audit of an
"earlier sorting" made from the demo's ground truth with 10% of each unit's spikes removed and 10%
extra spikes added at random times (the size of error a hand sorting makes). Writes ``units.png``
and ``audit_trace.png``. Settings, the trace cache and autosaves go to a temporary folder, never the
user's; the demo is only read.
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

SIZE = (1920, 1120)
"""Window size of both screenshots (pixels)."""


def _wait(win, what: str) -> None:
    if not win.wait_idle(600) or win.last_error:
        raise SystemExit(f"make_screenshots: {what} did not finish: {win.last_error}")


def units_screenshot(win, out: Path) -> None:
    """The first pass on the demo with the two largest units of the shown bundle selected."""
    ctl = win.units
    ctl.files.timer.stop()
    if not ctl.cluster():
        raise SystemExit(f"make_screenshots: clustering did not start: {win.last_error}")
    _wait(win, "the first pass")
    counts = ctl.sorting.counts()
    mine = sorted((u for u in counts if ctl.sorting.unit(u).group == win.bench.group), key=counts.get)
    ctl.set_selection(mine[-2:][::-1])
    _wait(win, "the quality plots")
    _capture(win, out / "units.png")


def audit_screenshot(win, out: Path, spikes: Path) -> None:
    """The audit of the earlier sorting against the session's units: the imported unit with the most
    spikes held by one side only, its channels on the traces with both spike trains above them. (The
    window grows wider than :data:`SIZE` here: the audit view's plots need the room.)"""
    from PySide6.QtCore import QCoreApplication

    if not win.audit.start(spikes):
        raise SystemExit(f"make_screenshots: the audit did not start: {win.last_error}")
    _wait(win, "the audit")
    r = win.audit.result
    matched = [int(u) for u in r.imported_ids if r.closest_fresh(int(u)) is not None]
    unit = max(matched, key=lambda u: r.row(u)["n_spikes"] - r.row(u)["shared_spikes"])
    win.audit_panel.select_unit(unit)
    for _ in range(600):
        QCoreApplication.processEvents()
        _wait(win, "the audit waveforms")
        if win.audit.pair is not None and win.audit.pair.imported.unit == unit:
            break
    win.audit_panel.plots.show_on_trace()
    _wait(win, "the trace view")
    _capture(win, out / "audit_trace.png")


def _capture(win, path: Path) -> None:
    from rigside.gui.screenshot import capture
    capture(win, str(path))
    print(f"wrote {path}")


def main(argv: list[str]) -> int:
    out = Path(argv[0]) if argv else Path(__file__).resolve().parent / "screenshots"
    out.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix="rigside-shots-") as tmp:
        os.environ["QT_QPA_PLATFORM"] = "offscreen"
        os.environ["RIGSIDE_CACHE_DIR"] = str(Path(tmp) / "cache")
        from PySide6.QtCore import QSettings
        from PySide6.QtWidgets import QApplication

        QSettings.setDefaultFormat(QSettings.Format.IniFormat)
        QSettings.setPath(QSettings.Format.IniFormat, QSettings.Scope.UserScope, str(Path(tmp) / "settings"))
        app = QApplication.instance() or QApplication(sys.argv[:1])
        app.setApplicationName("rigside")
        from rigside.core.synthetic.truth import write_imperfect_sorting
        from rigside.gui.window import MainWindow
        from rigside.sample_data import demo_path

        win = MainWindow(interactive=False)
        win.resize(*SIZE)
        win.show()
        try:
            if not win.open_demo():
                raise SystemExit(f"make_screenshots: the demo did not open: {win.last_error}")
            _wait(win, "detection")
            units_screenshot(win, out)
            spikes = Path(tmp) / "earlier_sorting.csv"
            write_imperfect_sorting(demo_path().with_name("demo.truth.csv"), spikes, 0.1, seed=1)
            audit_screenshot(win, out, spikes)
        finally:
            win.close()
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
