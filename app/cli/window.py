"""`rigside open` and `rigside demo`: the window commands (the only ones importing Qt)."""

from __future__ import annotations

import argparse
import os
import sys

from rigside.cli.common import add_recording_options, recording_options
from rigside.core.errors import RigsideError


def register(sub: argparse._SubParsersAction) -> None:
    o = sub.add_parser("open", help="open a recording or a session in the window",
                       description="Open a recording, or a session file (its units, labels, notes and undo "
                                   "history, with its stored events: nothing is detected again), in the "
                                   "rigside window. Session files are recognised by their content, not by "
                                   "their name.")
    o.add_argument("recording", metavar="FILE", help="recording or session file")
    o.add_argument("--session", metavar="S.h5",
                   help="open this session on FILE, the session's recording at a new place (moved or renamed)")
    o.add_argument("--screenshot", metavar="OUT.png",
                   help="render the window after loading to a PNG and exit (a session's recording is checked by "
                        "its quick fingerprint only, not hashed whole)")
    add_recording_options(o)
    o.set_defaults(func=run_open_command)   # no protected inputs: the window saves the session it opened
    d = sub.add_parser("demo", help="open the bundled demo recording in the window",
                       description="Open the bundled synthetic demo (with ground truth) in the window.")
    d.add_argument("--screenshot", metavar="OUT.png", help="render the window after loading to a PNG and exit")
    d.set_defaults(func=lambda a: run_window_command(None, a.screenshot, None, demo=True))


def run_open_command(args: argparse.Namespace) -> int:
    """Check what FILE (and --session) are before any window exists, then open them."""
    from rigside.core.units.session_open import check_session_file, file_kind

    kind = file_kind(args.recording)
    if args.session is not None:
        check_session_file(args.session)
        if kind == "session":
            raise RigsideError(f"FILE given with --session must be a recording, got the session {args.recording!r}")
    return run_window_command(args.recording, args.screenshot, recording_options(args), session=args.session)


def run_window_command(path: str | None, screenshot: str | None = None, options: dict | None = None,
                       demo: bool = False, session: str | None = None) -> int:
    """Open the window; render offscreen when only a screenshot is wanted and there is no display."""
    headless = (sys.platform.startswith("linux") and not os.environ.get("DISPLAY")
                and not os.environ.get("WAYLAND_DISPLAY") and not os.environ.get("QT_QPA_PLATFORM"))
    if headless and screenshot:
        os.environ["QT_QPA_PLATFORM"] = "offscreen"
    elif headless:
        raise RigsideError("the window needs a display, got none (no DISPLAY or WAYLAND_DISPLAY): run it in a "
                           "desktop session, under `xvfb-run`, or with --screenshot OUT.png")
    _import_the_engine(load_kernels=path is not None or demo)
    from rigside.gui.launch import run_window
    return run_window(path, screenshot=screenshot, recording_options=options, demo=demo, session=session)


def _import_the_engine(load_kernels: bool = True) -> None:
    """Import the numeric modules the window uses before Qt: PySide6 hooks the import of every module
    imported after it (it inspects the module for its own feature switches), which cost about a fifth of
    the window's start-up when numpy, numba, scipy and h5py came after it. With ``load_kernels`` (a file is
    to be opened) numba's one-time set-up is done here too, by loading the filter kernel: that set-up imports
    some 300 more modules (numba's typing registries, scipy.linalg for BLAS), about 0.1-0.2 s of CPU cheaper
    before Qt than on the window's worker thread after it, and the first drawing needs it anyway."""
    import rigside.core.audit.run  # noqa: F401
    import rigside.core.quality.unit_table  # noqa: F401
    import rigside.core.signal.features  # noqa: F401
    import rigside.core.units.session_open  # noqa: F401
    if load_kernels:
        from rigside.core.signal.filtering import warm_up
        warm_up()
