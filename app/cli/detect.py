"""`rigside detect`."""

from __future__ import annotations

import argparse
from contextlib import closing

from rigside.cli.common import add_param_options, add_recording_options, open_from_args, params_from_args
from rigside.cli.progressbar import TextProgress
from rigside.core.io.atomic import check_output


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("detect", help="filter, measure noise and detect events in a recording",
                       description="Band-pass the recording, estimate each channel's robust noise and "
                                   "write the detected events (CSV or HDF5) and an optional JSON summary.")
    p.add_argument("recording", help="raw binary (with metadata file or layout options), HDF5 or NWB recording")
    p.add_argument("--out", required=True, metavar="EVENTS.csv|EVENTS.h5", help="event file to write")
    p.add_argument("--summary", metavar="SUMMARY.json",
                   help="JSON summary: parameters and per-channel noise, threshold, counts")
    p.add_argument("--keep-artefacts", action="store_true", help="also write events flagged as artefacts")
    add_recording_options(p)
    add_param_options(p)
    p.set_defaults(func=run_detect, inputs=("recording", "params"))


def run_detect(args: argparse.Namespace) -> int:
    from rigside.core.runs.detect import detect_to_files
    from rigside.core.signal.noise import exclusion_notes

    out = check_output(args.out, args.recording, suffixes=(".csv", ".h5", ".hdf5"))
    if args.summary:
        check_output(args.summary, args.recording, suffixes=(".json",))
    params = params_from_args(args)
    with closing(open_from_args(args)) as rec, TextProgress(not args.quiet) as bar:
        done = detect_to_files(rec, params, out, args.summary, args.keep_artefacts, progress=bar)
    why = (f" ({done.artefacts_left_out:,} artefacts left out; --keep-artefacts writes them)"
           if done.artefacts_left_out else "")
    print(f"{len(done.events):,} events{why} on {rec.n_channels} channels in {rec.duration_s:.2f} s -> {out}")
    for note in exclusion_notes(rec.groups, rec.group_names, done.events.excluded):
        print(f"note: {note}")
    return 0
