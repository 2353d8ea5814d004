"""Opening a sorted session against opening its raw recording, whole commands.

Makes a synthetic recording in a temporary folder (``rigside synth``), sorts it headless
(``rigside sort``), then measures, each in its own process (wall time and the process's peak
resident memory from ``os.wait4``):
- ``rigside open SESSION --screenshot OUT.png``: the whole command, to a complete window with
  units and quality numbers (target: 3 s and 1 GB for 64 channels x 600 s);
- the session in the window, from the start of the process: first paint, quality numbers shown, complete;
  and the same for a copy saved without quality numbers (as older sessions are: they are computed);
- the raw recording in the window, started as the command starts it: time from ``open_path`` (and from the
  process start) to the first paint (traces and threshold; target 2 s) and to the complete window
  (detection and features done), against the time of ``rigside sort`` on it.

Each measurement is repeated (``--repeat``, default 3; the machine is shared) and given as min / median;
the ratios to the baseline are taken within each repeat. Compiled Python files are kept in a folder of the
run (``PYTHONPYCACHEPREFIX``), as an installed program has them, after one warm-up run of each command.

Run: python bench/bench_open_session.py [--channels 64] [--seconds 600] [--keep DIR] [--repeat 3]
     python bench/bench_open_session.py --session S.h5 [--recording REC]   (a session sorted before)
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

RAW_OPEN = """
import json, os, sys, time
start = time.perf_counter()
os.environ["QT_QPA_PLATFORM"] = "offscreen"
from rigside.cli.window import _import_the_engine
_import_the_engine()
from PySide6.QtWidgets import QApplication
from rigside.gui.window import MainWindow
app = QApplication([])
win = MainWindow(interactive=False)
win.resize(1600, 1000)
win.show()
app.processEvents()
t0 = time.perf_counter()
assert win.open_path(sys.argv[1])
win.repaint()
app.processEvents()
first = time.perf_counter() - t0
assert win.wait_idle(3600) and win.analysis_outcome == "done", win.last_error
print(json.dumps({"first_paint_s": first, "from_start_s": t0 - start + first, "complete_s": time.perf_counter() - t0}))
win.close()
"""
"""The raw recording in the window, started as the ``rigside open`` command starts it (the engine and numba's
set-up before Qt): first paint and complete from ``open_path``, and the first paint from the process start."""

SESSION_OPEN = """
import json, os, sys, time
t0 = time.perf_counter()
os.environ["QT_QPA_PLATFORM"] = "offscreen"
from rigside.cli.window import _import_the_engine
_import_the_engine()
from PySide6.QtCore import QTimer
from PySide6.QtWidgets import QApplication
from rigside.core.signal.filtering import warm_up
from rigside.gui.window import MainWindow
app = QApplication([])
win = MainWindow(interactive=False)
win.units.files.check_content = False
win.runner.submit("warm_up", "Preparing the filter", warm_up)
win.resize(1600, 1000)
win.show()
app.processEvents()
marks = {"window_s": time.perf_counter() - t0}
def poll():
    if "first_paint_s" not in marks and win.bench.events is not None:
        win.repaint()
        marks["first_paint_s"] = time.perf_counter() - t0
    ctl = win.units
    if "numbers_s" not in marks and ctl.sorting is not None and len(ctl.metrics) == len(ctl.sorting.units):
        marks["numbers_s"] = time.perf_counter() - t0
timer = QTimer(interval=5)
timer.timeout.connect(poll)
timer.start()
assert win.open_session(sys.argv[1], recording=sys.argv[2]) if len(sys.argv) > 2 else win.open_path(sys.argv[1])
assert win.wait_idle(600) and win.last_error is None, win.last_error
poll()
win.repaint()
marks["complete_s"] = time.perf_counter() - t0
print(json.dumps(marks), flush=True)
win.close()
from rigside.cli.process_end import end_process
end_process(0)
"""
"""The session in the window, times from the start of the process: window shown, first paint (traces and
threshold of the stored events), every unit's quality numbers, complete (no job left); then the process
ends as the ``rigside`` program ends it (the "end" figure: process time after complete)."""


BASELINE = """
import os, sys
os.environ["QT_QPA_PLATFORM"] = "offscreen"
import h5py, numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QApplication
app = QApplication([])
arrays = {}
for name in sys.argv[1:3]:
    with h5py.File(name, "r") as f:
        f.visititems(lambda k, v: arrays.setdefault(k, v[()]) if isinstance(v, h5py.Dataset) else None)
x = np.fromfile(sys.argv[3], dtype=np.int16, count=30000 * int(sys.argv[4])).reshape(-1, int(sys.argv[4]))
w = pg.PlotWidget()
w.resize(1600, 1000)
for c in range(x.shape[1]):
    w.plot(x[:, c].astype(np.float32) + 400 * c)
w.show()
app.processEvents()
w.grab().save(sys.argv[5])
"""
"""The plain floor of opening a session, written the obvious way: start Qt and pyqtgraph, read every
dataset of the session's two files with h5py, plot one second of every channel and save the PNG."""


WITHOUT_NUMBERS = """
import sys
from rigside.core.units.session import load_session, save_session
s = load_session(sys.argv[1])
s.unit_numbers = None
save_session(sys.argv[2], s)
"""
"""A copy of the session as sessions were saved before they kept their quality numbers."""


def measured(cmd: list[str]) -> tuple[float, float, str]:
    """Wall seconds, peak RSS (MB, the child's own, from ``os.wait4``) and stdout of one command."""
    t0 = time.perf_counter()
    p = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    out = p.stdout.read()
    err = p.stderr.read()
    _, status, usage = os.wait4(p.pid, 0)
    wall = time.perf_counter() - t0
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"{' '.join(cmd)} failed: {err.strip()[-400:]}")
    return wall, usage.ru_maxrss / 1024, out


def spread(values: list[float], digits: int = 2) -> str:
    """``min / median`` of repeated measurements."""
    return f"{min(values):.{digits}f} / {statistics.median(values):.{digits}f}"


def prepared(a: argparse.Namespace, work: Path, rigside: list[str]) -> tuple[Path, Path, Path | None, float]:
    """Recording, session, recording given beside the session (or None) and the sort time (nan if not run)."""
    if a.session:
        moved = Path(a.recording) if a.recording else None
        return moved, Path(a.session), moved, float("nan")
    rec, session = work / "rec.bin", work / "rec.session.h5"
    if not rec.exists():
        measured([*rigside, "synth", str(rec), "--channels", str(a.channels), "--seconds", str(a.seconds),
                  "--quiet"])
    sort_s = float("nan")
    if not session.exists():
        sort_s, sort_mb, out = measured([*rigside, "sort", str(rec), "--session", str(session), "--quiet"])
        print(f"sort: {sort_s:.1f} s, peak {sort_mb:.0f} MB  ({out.strip()})")
    return rec, session, None, sort_s


def session_runs(a, work: Path, rigside: list[str], rec: Path, session: Path, moved: Path | None) -> None:
    """The whole open command and the session in the window, each ``--repeat`` times with its baseline."""
    import h5py
    with h5py.File(session, "r") as f:
        static = session.parent / f.attrs["static_part"]
        n_channels = json.loads(f["recording"].attrs["description"])["n_channels"]
        recording = moved or Path(f["recording"].attrs["path"])
    old = work / "rec.no-numbers.h5"
    if not old.exists():
        measured([sys.executable, "-c", WITHOUT_NUMBERS, str(session), str(old)])
    on = [str(moved), "--session"] if moved else []
    baseline = [sys.executable, "-c", BASELINE, str(session), str(static), str(recording), str(n_channels),
                str(work / "baseline.png")]
    command = [*rigside, "open", *on, str(session), "--screenshot", str(work / "s.png")]
    windows = {label: [sys.executable, "-c", SESSION_OPEN, str(path), *([str(moved)] if moved else [])]
               for label, path in (("sorted session", session), ("session saved without quality numbers", old))}
    for cmd in (baseline, command):     # warm-up: compiled files written, files in the page cache
        measured(cmd)
    base, opened, inside = [], [], {label: [] for label in windows}
    for _ in range(a.repeat):
        base.append(measured(baseline))
        opened.append(measured(command))
        for label, cmd in windows.items():
            wall, mb, out = measured(cmd)
            inside[label].append((wall, mb, json.loads(out.strip().splitlines()[-1])))
    print(f"baseline (Qt + h5py read of both files + one plot), min / median of {a.repeat}: "
          f"{spread([b[0] for b in base])} s, {spread([b[1] for b in base], 0)} MB")
    print(f"open SESSION --screenshot (whole command, complete window): {spread([o[0] for o in opened])} s, "
          f"peak {spread([o[1] for o in opened], 0)} MB (target 3 s, 1000 MB at 64 x 600 s); ratio to baseline "
          f"{spread([o[0] / b[0] for o, b in zip(opened, base)])}")
    for label, runs in inside.items():
        marks = {k: spread([r[2][k] for r in runs]) for k in ("window_s", "first_paint_s", "numbers_s", "complete_s")}
        print(f"{label} in the window (from process start): window {marks['window_s']} s, first paint "
              f"{marks['first_paint_s']} s, quality numbers {marks['numbers_s']} s, complete {marks['complete_s']} s, "
              f"end {spread([r[0] - r[2]['complete_s'] for r in runs])} s, process {spread([r[0] for r in runs])} s, "
              f"peak {spread([r[1] for r in runs], 0)} MB; ratio to "
              f"baseline {spread([r[0] / b[0] for r, b in zip(runs, base)])}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--channels", type=int, default=64)
    ap.add_argument("--seconds", type=float, default=600.0)
    ap.add_argument("--keep", metavar="DIR", help="work in DIR (reused when it holds the files)")
    ap.add_argument("--repeat", type=int, default=3, help="measurements of each kind (min and median given)")
    ap.add_argument("--session", metavar="S.h5", help="measure this sorted session (no synth, sort or raw open)")
    ap.add_argument("--recording", metavar="REC", help="with --session: its recording at a new place")
    a = ap.parse_args()
    rigside = [sys.executable, "-m", "rigside"]
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(a.keep or tmp)
        work.mkdir(parents=True, exist_ok=True)
        os.environ["PYTHONPYCACHEPREFIX"] = str(work / "pycache")
        os.environ.pop("PYTHONDONTWRITEBYTECODE", None)
        rec, session, moved, sort_s = prepared(a, work, rigside)
        if rec is not None:
            print(f"recording: {rec.stat().st_size / 1e6:.0f} MB")
        session_runs(a, work, rigside, rec, session, moved)
        if a.session:
            return
        raw_s, raw_mb, out = measured([sys.executable, "-c", RAW_OPEN, str(rec)])
        r = json.loads(out.strip().splitlines()[-1])
        print(f"raw recording in the window: first paint {r['first_paint_s']:.2f} s (target 2 s; "
              f"{r['from_start_s']:.2f} s from the process start), complete "
              f"{r['complete_s']:.1f} s (target: sort time {sort_s:.1f} s), process {raw_s:.1f} s, "
              f"peak {raw_mb:.0f} MB")


if __name__ == "__main__":
    main()
