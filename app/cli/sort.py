"""`rigside sort`."""

from __future__ import annotations

import argparse
from contextlib import closing

from rigside.cli.common import add_param_options, add_recording_options, open_from_args, params_from_args
from rigside.cli.progressbar import TextProgress
from rigside.core.io.atomic import check_output


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("sort", help="detect, compute features and cluster into units, headless",
                       description="Run detection, waveform features and first-pass clustering per channel "
                                   "group, and save everything in a session file for curation.")
    p.add_argument("recording", help="recording file")
    p.add_argument("--session", required=True, metavar="OUT.h5", help="session file to write")
    p.add_argument("--clusters", type=int, metavar="K", help="force K clusters per group (default: chosen by BIC)")
    p.add_argument("--seed", type=int, help="clustering seed (default 0)")
    p.add_argument("--resume", action="store_true", help="continue an interrupted run from its checkpoint")
    p.add_argument("--no-overlap-pass", action="store_true",
                   help="skip the second pass that recovers spikes hidden by overlaps (template subtraction; "
                        "on by default, [overlaps] enabled in the parameter file)")
    p.add_argument("--overwrite", action="store_true",
                   help="replace an existing session (it is kept as NAME.bak, or NAME.bak.1, ... if taken)")
    add_recording_options(p)
    add_param_options(p)
    p.set_defaults(func=run_sort_command, inputs=("recording", "params"))


def run_sort_command(args: argparse.Namespace) -> int:
    from rigside.core.runs.sort import check_new_session, run_sort
    from rigside.core.signal.noise import exclusion_notes

    check_output(args.session, args.recording, suffixes=(".h5", ".hdf5"))
    check_new_session(args.session, args.overwrite)
    params = params_from_args(args)
    if args.clusters is not None:
        params.cluster.k = args.clusters
    if args.seed is not None:
        params.cluster.seed = args.seed
    if args.no_overlap_pass:
        params.overlaps.enabled = False
    params.cluster.validate()
    with closing(open_from_args(args)) as rec, TextProgress(not args.quiet) as bar:
        session, backup = run_sort(rec, params, args.session, resume=args.resume, progress=bar,
                                   overwrite=args.overwrite)
    n_units = len(session.sorting.units)
    ev = session.events
    n_art = int(ev.artefact.sum())
    why = f" ({n_art:,} artefacts kept for sorting, in no unit)" if n_art else ""
    if ev.recovered is not None:
        why += f" ({int(ev.recovered.sum()):,} recovered from overlaps)"
    print(f"{len(ev):,} events{why}, {n_units} units in {len(rec.groups)} groups -> {args.session}"
          + (f" (previous session kept as {backup})" if backup else ""))
    for note in exclusion_notes(rec.groups, rec.group_names, ev.excluded):
        print(f"note: {note}")
    return 0
