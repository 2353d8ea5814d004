"""The end of the ``rigside`` process: without the interpreter's teardown when nothing can be lost.

A normal interpreter exit spends about half a second freeing what a command held: after a window some
180,000 Python objects, every loaded module (NumPy, numba and LLVM, SciPy, h5py, pyqtgraph) and the Qt
objects behind the widgets; after a headless sort of 64 channels x 600 s, 0.4-0.5 s of its 10 s. Nothing of
that writes data: sessions, exports, event files and screenshots are written atomically (flushed,
fsynced and renamed) before the command returns, and the window waits for its jobs when it closes. So
the process ends with ``os._exit`` once what a normal exit does that matters is done: the exit functions
run (logging flushed, temporary folders removed, Qt's module shutdown) and the standard streams are
flushed. The normal exit is kept whenever the quick one could lose something: a thread still running
that is not a daemon, an HDF5 file still open for writing, a Python file other than the standard
streams still open for writing, or a standard stream that cannot be flushed.
"""

from __future__ import annotations

import atexit
import gc
import io
import os
import sys
import threading


def quick_end_is_safe() -> bool:
    """No thread but daemons left running and no HDF5 or Python file open for writing."""
    main = threading.main_thread()
    if any(t.is_alive() and not t.daemon and t is not main for t in threading.enumerate()):
        return False
    if _open_for_writing():
        return False
    h5py = sys.modules.get("h5py")
    if h5py is None:
        return True
    files = h5py.h5f.get_obj_ids(types=h5py.h5f.OBJ_FILE)
    return not any(f.get_intent() & h5py.h5f.ACC_RDWR for f in files)


def _open_for_writing() -> bool:
    """A Python file object other than the standard streams is open for writing (its buffer would be lost)."""
    standard = {id(x) for s in (sys.stdout, sys.stderr, sys.__stdout__, sys.__stderr__)
                for x in (s, getattr(s, "buffer", None))}
    for o in gc.get_objects():
        if not isinstance(o, io.IOBase) or id(o) in standard or o.closed:
            continue
        try:
            fd = o.fileno()
        except (OSError, ValueError):   # in memory (no descriptor): nothing to lose on disk
            continue
        if fd > 2 and o.writable():
            return True
    return False


def end_process(code: int) -> None:
    """Leave the process with ``code``: quickly when :func:`quick_end_is_safe`, else by the normal ``sys.exit``."""
    if not quick_end_is_safe():
        sys.exit(code)
    atexit._run_exitfuncs()
    try:
        for stream in (sys.stdout, sys.stderr):
            if stream is not None:
                stream.flush()
    except (OSError, ValueError):   # a closed or broken stream: the normal exit reports it
        sys.exit(code)
    os._exit(code)
