"""``python -m rigside``: the command line (the same as the ``rigside`` command)."""

import sys

from rigside.cli.main import main

sys.exit(main())
