"""Import guard: makes Qt, pyqtgraph and the window and command-line packages unimportable, to
prove the core runs without them.

Imported first by the subprocesses of tests/test_boundaries.py and tests/core/test_report_figures.py.
"""

import importlib.abc
import sys

BLOCKED = ("PySide6", "shiboken6", "pyqtgraph", "rigside.gui", "rigside.cli")


class _Refuse(importlib.abc.MetaPathFinder):
    def find_spec(self, name, path=None, target=None):
        if any(name == b or name.startswith(b + ".") for b in BLOCKED):
            raise ImportError(f"{name} is blocked: the core must run without Qt")
        return None


sys.meta_path.insert(0, _Refuse())
