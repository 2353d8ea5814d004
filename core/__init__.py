"""rigside numeric core: recordings to curated, quality-scored spike trains.

This package never imports Qt, pyqtgraph or ``app`` (checked by an import-linter contract).
"""

__version__ = "0.1.0"
