"""The ``rigside`` command line: ``main`` parses, and one module per command family registers its
commands. Heavy modules are imported inside the commands; only ``window`` imports Qt (lazily).
May import ``rigside.gui`` (to start the window) and ``rigside.core``."""
