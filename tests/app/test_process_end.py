"""The quick end of the process: exit functions run, streams flushed, the exit code kept (after a window
and after a headless command); the normal exit whenever something could still be lost (a running thread,
an HDF5 file or a Python file open for writing)."""

from __future__ import annotations

import os
import subprocess
import sys

AFTER_A_WINDOW = """
import atexit, sys
from PySide6.QtWidgets import QApplication
from rigside.cli.process_end import end_process
app = QApplication([])
atexit.register(lambda: open(sys.argv[1], "w").write("exit functions ran"))
print("written before the end", end="")   # left in the buffer of a pipe
end_process(3)
"""


def test_the_quick_end_runs_exit_functions_flushes_and_keeps_the_code(tmp_path):
    marker = tmp_path / "marker.txt"
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen")
    out = subprocess.run([sys.executable, "-c", AFTER_A_WINDOW, str(marker)], capture_output=True, text=True,
                         env=env, timeout=120)
    assert out.returncode == 3, out.stderr
    assert out.stdout == "written before the end"
    assert marker.read_text() == "exit functions ran"


HEADLESS = """
import sys
from rigside.cli.main import run
class Teardown:   # deleted only by the interpreter's teardown, which the quick end skips
    def __del__(self):
        print("interpreter teardown", file=sys.stderr)
marker = Teardown()
sys.argv = ["rigside", *sys.argv[1:]]
run()
"""


def test_a_headless_command_ends_quickly_with_its_output_complete(tmp_path):
    """`rigside synth` (no window) leaves by the quick end (no interpreter teardown); its file is whole,
    its summary reaches the pipe and its code is kept; an input error keeps its one line and code."""
    out_path = tmp_path / "s.bin"
    out = subprocess.run([sys.executable, "-c", HEADLESS, "synth", str(out_path), "--seconds", "1", "--channels", "4",
                          "--seed", "0"], capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr
    assert "interpreter teardown" not in out.stderr
    assert "->" in out.stdout                                   # its summary line reached the pipe
    assert out_path.stat().st_size == 30000 * 4 * 2             # 1 s x 4 channels of int16 at 30 kHz
    bad = subprocess.run([sys.executable, "-m", "rigside", "synth", str(out_path), "--seconds", "-1"],
                         capture_output=True, text=True, timeout=300)
    assert bad.returncode == 2 and bad.stderr.count("\n") == 1   # one line, the input error's code


SCENARIOS = """
import io, sys, threading
import h5py, numpy as np
from rigside.cli.process_end import quick_end_is_safe
seen = [quick_end_is_safe()]
with h5py.File(sys.argv[1] + "/w.h5", "w") as f:
    f["x"] = np.arange(3)
    seen.append(quick_end_is_safe())
with h5py.File(sys.argv[1] + "/w.h5", "r"):   # open for reading only: nothing to lose
    seen.append(quick_end_is_safe())
with open(sys.argv[1] + "/w.txt", "w") as f:
    f.write("buffered")
    seen.append(quick_end_is_safe())
with open(sys.argv[1] + "/w.txt") as f, io.StringIO() as mem:   # read only, or in memory
    mem.write(f.read())
    seen.append(quick_end_is_safe())
release = threading.Event()
worker = threading.Thread(target=release.wait)
worker.start()
seen.append(quick_end_is_safe())
release.set()
worker.join()
seen.append(quick_end_is_safe())
print(seen)
"""


def test_the_quick_end_waits_for_writers_and_threads(tmp_path):
    """In a fresh process (a test runner holds files of its own open): an HDF5 file or a Python file open
    for writing, or a running thread, keeps the normal exit; readers and in-memory streams do not."""
    out = subprocess.run([sys.executable, "-c", SCENARIOS, str(tmp_path)], capture_output=True, text=True,
                         timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == str([True, False, True, False, True, False, True])
