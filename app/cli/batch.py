"""`rigside batch`: detection over many recordings, locally or on Dask (local processes or a cluster)."""

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
from rigside.core.errors import ParamError, RigsideError
from rigside.core.runs.batch import ENGINES, check_engine


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("batch", help="detect events in many recordings with the same parameters",
                       description="Run detection on every recording given, writing NAME.events.csv (or .h5) "
                                   "and NAME.summary.json per recording and batch.csv listing the outcomes. "
                                   "A recording that fails is reported and the others go on.")
    p.add_argument("recordings", nargs="+", help="recording files (same layout options for all)")
    p.add_argument("--out-dir", required=True, metavar="DIR", help="folder for the outputs (created if missing)")
    p.add_argument("--format", choices=("csv", "h5"), default="csv", help="event file format (default csv)")
    p.add_argument("--engine", choices=ENGINES, default="local",
                   help="local: one recording after another; dask: one task per recording, on local "
                        "processes or with --scheduler on a running Dask cluster")
    p.add_argument("--processes", type=int, default=2,
                   help="local processes for the dask engine without --scheduler (default 2)")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="running dask.distributed scheduler (e.g. tcp://host:8786) whose workers run the tasks; "
                        "recordings and --out-dir must be at the same paths on every worker")
    p.add_argument("--connect-timeout", type=float, default=10.0, metavar="SECONDS",
                   help="limit for reaching the scheduler and finding a worker there (default 10)")
    add_recording_options(p)
    add_param_options(p)
    p.set_defaults(func=run_batch_command, inputs=("recordings", "params"))


def run_batch_command(args: argparse.Namespace) -> int:
    from rigside.core.runs.batch import run_batch

    out = check_folder(args.out_dir, "batch output")
    if not 1 <= args.processes <= 256:
        raise ParamError(f"process count must be from 1 to 256, got {args.processes}")
    params = params_from_args(args)
    check_engine(args.engine, args.scheduler, args.connect_timeout)
    made = not out.exists()
    out.mkdir(exist_ok=True)
    try:
        with TextProgress(not args.quiet) as bar:
            outcomes = run_batch(args.recordings, out, params, recording_options(args), args.format,
                                 args.engine, args.processes, progress=bar, scheduler=args.scheduler,
                                 connect_timeout_s=args.connect_timeout)
    except RigsideError:
        if made and not any(out.iterdir()):
            out.rmdir()   # refused before writing anything: leave no trace
        raise
    failed = [o for o in outcomes if o.status != "done"]
    for o in failed:
        print(f"failed: {o.recording}: {o.message}")
    print(f"{len(outcomes) - len(failed)} of {len(outcomes)} recordings done -> {out / 'batch.csv'}")
    return 2 if failed else 0
