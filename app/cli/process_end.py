"""The end of the ``rigside`` process after a window: without the interpreter's teardown.

After the window closed, a normal interpreter exit spends about half a second freeing what the
window held: some 180,000 Python objects, every loaded module (NumPy, numba and LLVM, SciPy, h5py,
pyqtgraph) and the Qt objects behind the widgets. Nothing of that writes data: sessions, exports
and screenshots are written atomically (flushed, fsynced and renamed) before the window closes,
and the window waits for its jobs when it closes. So the process ends with ``os._exit`` once what
a normal exit does that matters is done: the exit functions run (logging flushed, temporary
folders removed, Qt's module shutdown) and the standard streams are flushed. The normal exit is
kept whenever the quick one could lose something: a thread still running that is not a daemon,
an HDF5 file still open for writing, or a standard stream that cannot be flushed.
"""

from __future__ import annotations

import atexit
import os
import sys
import threading


def window_ran() -> bool:
    """True when this process started Qt's application object (a window command ran)."""
    core = sys.modules.get("PySide6.QtCore")
    return core is not None and core.QCoreApplication.instance() is not None


def quick_end_is_safe() -> bool:
    """No thread but daemons left running and no HDF5 file open for writing."""
    main = threading.main_thread()
    if any(t.is_alive() and not t.daemon and t is not main for t in threading.enumerate()):
        return False
    h5py = sys.modules.get("h5py")
    if h5py is None:
        return True
    files = h5py.h5f.get_obj_ids(types=h5py.h5f.OBJ_FILE)
    return not any(f.get_intent() & h5py.h5f.ACC_RDWR for f in files)


def end_process(code: int) -> None:
    """Leave the process with ``code``: quickly after a window when :func:`quick_end_is_safe`,
    else by the normal ``sys.exit``."""
    if not (window_ran() and quick_end_is_safe()):
        sys.exit(code)
    atexit._run_exitfuncs()
    try:
        for stream in (sys.stdout, sys.stderr):
            if stream is not None:
                stream.flush()
    except (OSError, ValueError):   # a closed or broken stream: the normal exit reports it
        sys.exit(code)
    os._exit(code)
