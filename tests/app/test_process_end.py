"""The quick end of the process after a window: exit functions run, streams flushed, the exit code kept;
the normal exit whenever something could still be lost (a running thread, an HDF5 file open for writing)."""

from __future__ import annotations

import os
import subprocess
import sys
import threading

import h5py
import numpy as np

from rigside.cli.process_end import quick_end_is_safe, window_ran

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


def test_a_window_ran_only_with_an_application_object(qapp):
    assert window_ran()
    probe = "import sys; from rigside.cli.process_end import window_ran; print(window_ran())"
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=True, timeout=120)
    assert out.stdout.strip() == "False"


def test_an_hdf5_file_open_for_writing_keeps_the_normal_exit(tmp_path):
    assert quick_end_is_safe()
    with h5py.File(tmp_path / "w.h5", "w") as f:
        f["x"] = np.arange(3)
        assert not quick_end_is_safe()
    with h5py.File(tmp_path / "w.h5", "r"):   # open for reading only: nothing to lose
        assert quick_end_is_safe()


def test_a_running_thread_keeps_the_normal_exit():
    release = threading.Event()
    worker = threading.Thread(target=release.wait)
    worker.start()
    try:
        assert not quick_end_is_safe()
    finally:
        release.set()
        worker.join()
    assert quick_end_is_safe()
