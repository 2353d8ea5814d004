"""`rigside open` and `rigside demo`: the window commands (the only ones importing Qt)."""

from __future__ import annotations

import argparse
import os
import sys

from rigside.cli.common import add_recording_options, recording_options
from rigside.core.errors import RigsideError


def register(sub: argparse._SubParsersAction) -> None:
    o = sub.add_parser("open", help="open a recording in the window",
                       description="Open a recording in the rigside window.")
    o.add_argument("recording", help="recording file")
    o.add_argument("--screenshot", metavar="OUT.png", help="render the window after loading to a PNG and exit")
    add_recording_options(o)
    o.set_defaults(func=lambda a: run_window_command(a.recording, a.screenshot, recording_options(a)))
    d = sub.add_parser("demo", help="open the bundled demo recording in the window",
                       description="Open the bundled synthetic demo (with ground truth) in the window.")
    d.add_argument("--screenshot", metavar="OUT.png", help="render the window after loading to a PNG and exit")
    d.set_defaults(func=lambda a: run_window_command(None, a.screenshot, None, demo=True))


def run_window_command(path: str | None, screenshot: str | None = None, options: dict | None = None,
                       demo: bool = False) -> int:
    """Open the window; render offscreen when only a screenshot is wanted and there is no display."""
    headless = (sys.platform.startswith("linux") and not os.environ.get("DISPLAY")
                and not os.environ.get("WAYLAND_DISPLAY") and not os.environ.get("QT_QPA_PLATFORM"))
    if headless and screenshot:
        os.environ["QT_QPA_PLATFORM"] = "offscreen"
    elif headless:
        raise RigsideError("the window needs a display, got none (no DISPLAY or WAYLAND_DISPLAY): run it in a "
                           "desktop session, under `xvfb-run`, or with --screenshot OUT.png")
    from rigside.gui.window import run_window
    return run_window(path, screenshot=screenshot, recording_options=options, demo=demo)
