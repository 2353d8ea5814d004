"""rigside: from raw extracellular recordings to curated, quality-scored spike trains.

``rigside.cli`` is the command line, ``rigside.gui`` the window (PySide6 + pyqtgraph) and
``rigside.core`` the Qt-free numeric engine they both call. Imports run one way:
cli -> gui -> core (checked by import-linter contracts in pyproject.toml).
"""

from rigside.core import __version__

__all__ = ["__version__"]
