"""`rigside sort` and `rigside export`."""

from __future__ import annotations

import argparse
from contextlib import closing

from rigside.cli.common import add_param_options, add_recording_options, check_folder, open_from_args, params_from_args
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
    p.add_argument("--overwrite", action="store_true",
                   help="replace an existing session (it is kept as NAME.bak, or NAME.bak.1, ... if taken)")
    add_recording_options(p)
    add_param_options(p)
    p.set_defaults(func=run_sort_command, inputs=("recording", "params"))

    e = sub.add_parser("export", help="write spike times per unit and a binned spike matrix",
                       description="Write into DIR, from a session: unit_times.csv (columns unit,label,time_s), "
                                   "unit_<id>.npy (spike times in seconds, one file per unit), binned.h5 "
                                   "(spike counts, units x bins of --bin-ms) and export.json (what was "
                                   "written, from which session).")
    e.add_argument("session", help="session file")
    e.add_argument("--out", required=True, metavar="DIR", help="folder to write (created if missing)")
    e.add_argument("--bin-ms", type=float, default=1.0, help="bin width of the spike matrix (default 1 ms)")
    e.add_argument("--quiet", action="store_true", help="no progress bar")
    e.set_defaults(func=run_export_command, inputs=("session",))


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
    params.cluster.validate()
    with closing(open_from_args(args)) as rec, TextProgress(not args.quiet) as bar:
        session, backup = run_sort(rec, params, args.session, resume=args.resume, progress=bar,
                                   overwrite=args.overwrite)
    n_units = len(session.sorting.units)
    ev = session.events
    n_art = int(ev.artefact.sum())
    why = f" ({n_art:,} artefacts kept for sorting, in no unit)" if n_art else ""
    print(f"{len(ev):,} events{why}, {n_units} units in {len(rec.groups)} groups -> {args.session}"
          + (f" (previous session kept as {backup})" if backup else ""))
    for note in exclusion_notes(rec.groups, rec.group_names, ev.excluded):
        print(f"note: {note}")
    return 0


def run_export_command(args: argparse.Namespace) -> int:
    from rigside.core.exports.units import export_units
    from rigside.core.units.session import load_session

    out = check_folder(args.out, "export")
    session = load_session(args.session, check_recording=False)
    with TextProgress(not args.quiet) as bar:
        written = export_units(session, out, bin_ms=args.bin_ms, progress=bar)
    n = sum(len(v) for v in written.values())
    print(f"{n} files -> {out}")
    return 0
