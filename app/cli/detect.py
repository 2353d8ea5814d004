"""`rigside detect` and `rigside synth`."""

from __future__ import annotations

import argparse
import math

from rigside.cli.common import add_param_options, add_recording_options, open_from_args, params_from_args
from rigside.cli.progressbar import TextProgress
from rigside.core.errors import ParamError
from rigside.core.io.atomic import check_output


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("detect", help="filter, measure noise and detect events in a recording",
                       description="Band-pass the recording, estimate each channel's robust noise and "
                                   "write the detected events (CSV or HDF5) and an optional JSON summary.")
    p.add_argument("recording", help="raw binary (with metadata file or layout options) or HDF5 recording")
    p.add_argument("--out", required=True, metavar="EVENTS.csv|EVENTS.h5", help="event file to write")
    p.add_argument("--summary", metavar="SUMMARY.json",
                   help="JSON summary: parameters and per-channel noise, threshold, counts")
    p.add_argument("--keep-artefacts", action="store_true", help="also write events flagged as artefacts")
    add_recording_options(p)
    add_param_options(p)
    p.set_defaults(func=run_detect, inputs=("recording", "params"))

    s = sub.add_parser("synth", help="write a synthetic recording with known ground truth",
                       description="Write the demo scenario (4-wire bundles, 3 units each, artefacts, hum, "
                                   "drift, coloured noise) as int16 raw data with its metadata and ground truth; "
                                   "with --probe, a probe (site positions, units whose amplitude decays with "
                                   "distance, drift along the probe, overlapping spikes; --sites replaces "
                                   "--channels).")
    s.add_argument("out", help="raw file to write (e.g. demo.bin); metadata and truth files go beside it")
    s.add_argument("--seconds", type=float, default=60.0, help="length in seconds (default 60)")
    s.add_argument("--channels", type=int, default=16, help="channel count (default 16)")
    s.add_argument("--rate", type=float, default=30000.0, metavar="HZ", help="sampling rate (default 30000)")
    s.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    s.add_argument("--overwrite", action="store_true", help="replace existing files of the same name")
    s.add_argument("--quiet", action="store_true", help="no progress bar")
    g = s.add_argument_group("probe scenario (--probe: sites with positions instead of 4-wire bundles)")
    g.add_argument("--probe", action="store_true", help="write a probe recording with site positions")
    g.add_argument("--sites", type=int, help=f"site count over all shanks (default {PROBE_DEFAULTS['sites']})")
    g.add_argument("--columns", type=int, help=f"columns of sites per shank (default {PROBE_DEFAULTS['columns']})")
    g.add_argument("--pitch-um", type=float, metavar="UM",
                   help=f"site spacing across and along the shank (default {PROBE_DEFAULTS['pitch_um']:g} um)")
    g.add_argument("--shanks", type=int, help=f"shank count (default {PROBE_DEFAULTS['shanks']})")
    g.add_argument("--drift-um", type=float, metavar="UM",
                   help="movement of every unit along the probe over the recording (default 0 um)")
    s.set_defaults(func=run_synth)


PROBE_DEFAULTS = {"sites": 64, "columns": 2, "pitch_um": 20.0, "shanks": 1, "drift_um": 0.0}


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
    given = [k for k in PROBE_DEFAULTS if getattr(args, k) is not None]
    if given and not args.probe:
        raise ParamError(f"probe options must come with --probe, got --{given[0].replace('_', '-')} without it")
    bar = TextProgress(not args.quiet)
    try:
        if args.probe:
            sc = _write_probe(out, args, bar)
            what = f"{len(sc.positions)} sites on {int(sc.shank.max()) + 1} shank(s)"
        else:
            sc = write_synth(out, args.seconds, args.channels, args.seed, args.rate, progress=bar,
                             overwrite=args.overwrite)
            what = f"{args.channels} channels"
    finally:
        bar.close()
    print(f"{len(sc.spike_sample)} spikes of {len(sc.units)} units, {what}, "
          f"{args.seconds:g} s -> {out} (+ metadata and ground truth)")
    return 0


def _write_probe(out, args: argparse.Namespace, bar: TextProgress):
    """The probe scenario with the command's options (each checked: one line, exit 2)."""
    from rigside.core.synthetic.probe_synth import write_probe_synth

    o = {k: PROBE_DEFAULTS[k] if getattr(args, k) is None else getattr(args, k) for k in PROBE_DEFAULTS}
    if not (1 <= o["shanks"] <= 16 and 1 <= o["columns"] <= 16 and 1 <= o["sites"] <= 1024
            and o["sites"] % (o["shanks"] * o["columns"]) == 0):
        raise ParamError(f"probe sites must be from 1 to 1024 and a multiple of shanks x columns (shanks and "
                         f"columns from 1 to 16), got {o['sites']} sites, {o['shanks']} shanks, {o['columns']} columns")
    if not (math.isfinite(o["pitch_um"]) and 1 <= o["pitch_um"] <= 1000):
        raise ParamError(f"probe pitch must be between 1 and 1000 um, got {o['pitch_um']:g} um")
    if not (math.isfinite(o["drift_um"]) and abs(o["drift_um"]) <= 1000):
        raise ParamError(f"probe drift must be at most 1000 um either way, got {o['drift_um']:g} um")
    return write_probe_synth(out, args.seconds, seed=args.seed, rate_hz=args.rate, progress=bar,
                             overwrite=args.overwrite, **o)
