"""`rigside batch`: detection over many recordings, locally or on Dask."""

from __future__ import annotations

import argparse

from rigside.cli.common import (
    add_param_options,
    add_recording_options,
    check_folder,
    params_from_args,
    recording_options,
)
from rigside.cli.progressbar import TextProgress
from rigside.core.errors import ParamError
from rigside.core.runs.batch import ENGINES


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("batch", help="detect events in many recordings with the same parameters",
                       description="Run detection on every recording given, writing NAME.events.csv (or .h5) "
                                   "and NAME.summary.json per recording and batch.csv listing the outcomes. "
                                   "A recording that fails is reported and the others go on.")
    p.add_argument("recordings", nargs="+", help="recording files (same layout options for all)")
    p.add_argument("--out-dir", required=True, metavar="DIR", help="folder for the outputs (created if missing)")
    p.add_argument("--format", choices=("csv", "h5"), default="csv", help="event file format (default csv)")
    p.add_argument("--engine", choices=ENGINES, default="local",
                   help="local: one recording after another; dask: one task per recording on local processes")
    p.add_argument("--processes", type=int, default=2, help="processes for the dask engine (default 2)")
    add_recording_options(p)
    add_param_options(p)
    p.set_defaults(func=run_batch_command, inputs=("recordings", "params"))


def run_batch_command(args: argparse.Namespace) -> int:
    from rigside.core.runs.batch import run_batch

    out = check_folder(args.out_dir, "batch output")
    if not 1 <= args.processes <= 256:
        raise ParamError(f"process count must be from 1 to 256, got {args.processes}")
    params = params_from_args(args)
    out.mkdir(exist_ok=True)
    with TextProgress(not args.quiet) as bar:
        outcomes = run_batch(args.recordings, out, params, recording_options(args), args.format, args.engine,
                             args.processes, progress=bar)
    failed = [o for o in outcomes if o.status != "done"]
    for o in failed:
        print(f"failed: {o.recording}: {o.message}")
    print(f"{len(outcomes) - len(failed)} of {len(outcomes)} recordings done -> {out / 'batch.csv'}")
    return 2 if failed else 0
