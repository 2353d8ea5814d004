"""The ``rigside`` command line. Imports Qt only for the window commands."""

from __future__ import annotations

import argparse
import sys

from rigside.core import __version__
from rigside.core.errors import RigsideError
from rigside.core.io.atomic import protect_inputs
from rigside.core.progress import Cancelled

EXIT_OK, EXIT_FAILURE, EXIT_INPUT, EXIT_CANCELLED = 0, 1, 2, 130
COMMAND_MODULES = ("detect", "synth", "batch", "sort", "export", "metrics", "suggest", "audit", "window")
COMMAND_HOME = {"detect": "detect", "synth": "synth", "batch": "batch", "sort": "sort", "export": "export",
                "metrics": "metrics", "suggest": "suggest", "audit": "audit", "open": "window", "demo": "window"}
"""Module registering each command: running one command imports only its module (start-up time)."""


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """The argument parser with every command registered (or only ``command``'s module)."""
    p = argparse.ArgumentParser(prog="rigside", description="From raw extracellular recordings to curated, "
                                "quality-scored spike trains. Run without a command to open the window.")
    p.add_argument("--version", action="version", version=f"rigside {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    import importlib
    modules = (COMMAND_HOME[command],) if command in COMMAND_HOME else COMMAND_MODULES
    for name in dict.fromkeys(modules):
        importlib.import_module(f"rigside.cli.{name}").register(sub)
    return p


def main(argv: list[str] | None = None) -> int:
    """Run a command; returns the exit code (0 ok, 1 failure, 2 input error, 130 cancelled)."""
    argv = sys.argv[1:] if argv is None else list(argv)
    first = next((a for a in argv if not a.startswith("-")), None)
    parser = build_parser(first)
    args = parser.parse_args(argv)
    try:
        if args.command is None:
            from rigside.cli.window import run_window_command
            return run_window_command(None)
        from rigside.cli.common import command_inputs
        with protect_inputs(command_inputs(args)):
            return int(args.func(args) or 0)
    except RigsideError as exc:
        print(f"rigside {args.command or ''}: error: {exc}".replace(" :", ":"), file=sys.stderr)
        return EXIT_INPUT
    except OSError as exc:
        where = f": {exc.filename}" if exc.filename else ""
        print(f"rigside {args.command}: error: {exc.strerror or exc}{where}", file=sys.stderr)
        return EXIT_INPUT
    except (Cancelled, KeyboardInterrupt):
        print(f"rigside {args.command}: cancelled", file=sys.stderr)
        return EXIT_CANCELLED


def run() -> None:
    """The ``rigside`` program (its console script and ``python -m rigside``): :func:`main`, then the
    end of the process (quick when nothing can be lost, :mod:`rigside.cli.process_end`)."""
    code = main()
    from rigside.cli.process_end import end_process
    end_process(code)


if __name__ == "__main__":
    run()
