"""``python -m rigside``: the command line (the same as the ``rigside`` command)."""

from rigside.cli.main import run

run()
