"""Heavy modules imported in a background thread, so that the pass which needs them later does not stall.

A sort needs scikit-learn's PCA (when a group's fit subset is full, in the thread collecting the
chunks) and its k-means (before the clustering workers fork). Importing scikit-learn costs 0.7 s
of one core on a quiet 2-core machine and several seconds under load; done in the collecting
thread it stops the chunk pool, whose workers wait for their results to be taken. Started at the
beginning of the pass, the import runs while the compiled kernels (which release the GIL) work.
Join the thread before forking worker processes: a fork during an import would copy the held
import locks into the child.
"""

from __future__ import annotations

import importlib
import threading


def preload(*modules: str) -> threading.Thread:
    """Start importing ``modules`` in a daemon thread and return it (``join`` it before a fork).

    A module that fails to import is skipped: the later import in the code that needs it raises the error.
    """
    def run() -> None:
        for name in modules:
            try:
                importlib.import_module(name)
            except ImportError:
                continue

    thread = threading.Thread(target=run, name="rigside-preload", daemon=True)
    thread.start()
    return thread
