"""The window: the frame (``window``), its controllers and workers, ``panels`` (one file per panel)
and ``dialogs``. It holds no numerics; it calls ``rigside.core`` and runs long work off the GUI
thread. May import ``rigside.core`` only (never the command line)."""
