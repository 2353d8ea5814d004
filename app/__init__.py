"""rigside's desktop window (PySide6 + pyqtgraph) and command line."""
