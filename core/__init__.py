"""rigside numeric core: recordings to curated, quality-scored spike trains.

Rooms, each importing only from those listed after it: ``audit``, ``runs``, ``exports``,
``synthetic``, ``quality``, ``units``, ``signal``, then the modules ``events`` and ``params``, the room
``io``, and the shared ``errors``, ``progress``, ``numbers`` and ``textparse``. The core never imports
Qt, pyqtgraph, ``rigside.gui`` or ``rigside.cli`` (checked by import-linter contracts).
"""

__version__ = "0.1.0"
