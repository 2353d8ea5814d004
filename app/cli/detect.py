"""`rigside detect` and `rigside synth`."""

from __future__ import annotations

import argparse

from rigside.cli.common import add_param_options, add_recording_options, open_from_args, params_from_args
from rigside.cli.progressbar import TextProgress
from rigside.core.errors import ParamError
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

    s = sub.add_parser("synth", help="write a synthetic recording with known ground truth",
                       description="Write the demo scenario (4-wire bundles, 3 units each, artefacts, hum, "
                                   "drift, coloured noise) as int16 raw data with its metadata and ground truth.")
    s.add_argument("out", help="raw file to write (e.g. demo.bin); metadata and truth files go beside it")
    s.add_argument("--seconds", type=float, default=60.0, help="length in seconds (default 60)")
    s.add_argument("--channels", type=int, default=16, help="channel count (default 16)")
    s.add_argument("--rate", type=float, default=30000.0, metavar="HZ", help="sampling rate (default 30000)")
    s.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    s.add_argument("--overwrite", action="store_true", help="replace existing files of the same name")
    s.add_argument("--quiet", action="store_true", help="no progress bar")
    s.set_defaults(func=run_synth)


def run_detect(args: argparse.Namespace) -> int:
    from rigside.core.runs.detect import detect_to_files
    from rigside.core.signal.noise import exclusion_notes

    out = check_output(args.out, args.recording, suffixes=(".csv", ".h5", ".hdf5"))
    if args.summary:
        check_output(args.summary, args.recording, suffixes=(".json",))
    params = params_from_args(args)
    rec = open_from_args(args)
    bar = TextProgress(not args.quiet)
    try:
        done = detect_to_files(rec, params, out, args.summary, args.keep_artefacts, progress=bar)
    finally:
        bar.close()
        rec.close()
    why = (f" ({done.artefacts_left_out:,} artefacts left out; --keep-artefacts writes them)"
           if done.artefacts_left_out else "")
    print(f"{len(done.events):,} events{why} on {rec.n_channels} channels in {rec.duration_s:.2f} s -> {out}")
    for note in exclusion_notes(rec.groups, rec.group_names, done.events.excluded):
        print(f"note: {note}")
    return 0


def run_synth(args: argparse.Namespace) -> int:
    from rigside.core.synthetic.synth import write_synth

    out = check_output(args.out)
    if not args.seconds > 0 or args.seconds > 24 * 3600:
        raise ParamError(f"synthetic length must be between 0 and 86400 s, got {args.seconds:g} s")
    if not 1 <= args.channels <= 1024:
        raise ParamError(f"synthetic channel count must be from 1 to 1024, got {args.channels}")
    if not 1000 <= args.rate <= 100000:
        raise ParamError(f"synthetic sampling rate must be between 1000 and 100000 Hz, got {args.rate:g} Hz")
    bar = TextProgress(not args.quiet)
    try:
        sc = write_synth(out, args.seconds, args.channels, args.seed, args.rate, progress=bar,
                         overwrite=args.overwrite)
    finally:
        bar.close()
    print(f"{len(sc.spike_sample)} spikes of {len(sc.units)} units, {args.channels} channels, "
          f"{args.seconds:g} s -> {out} (+ metadata and ground truth)")
    return 0
