"""`rigside export`: curated spike times as an export folder and/or an NWB file."""

from __future__ import annotations

import argparse
from contextlib import closing
from pathlib import Path

from rigside.cli.common import add_recording_options, check_folder, recording_options
from rigside.cli.progressbar import TextProgress
from rigside.core.errors import ParamError


def register(sub: argparse._SubParsersAction) -> None:
    e = sub.add_parser("export", help="write spike times per unit, a binned spike matrix or an NWB file",
                       description="Write, from a session: with --out DIR, into DIR: unit_times.csv (columns "
                                   "unit,label,time_s), unit_<id>.npy (spike times in seconds, one file per unit), "
                                   "binned.h5 (spike counts, units x bins of --bin-ms) and export.json (what was "
                                   "written, from which session); with --nwb OUT.nwb, that one NWB file (units "
                                   "table with spike times, electrodes, label, quality columns and mean waveforms, "
                                   "with the session's provenance). Each file is written whole or not at all.")
    e.add_argument("session", help="session file")
    e.add_argument("--out", metavar="DIR", help="folder to write (created if missing)")
    e.add_argument("--bin-ms", type=float, default=1.0, help="bin width of the spike matrix (default 1 ms)")
    e.add_argument("--nwb", metavar="OUT.nwb", help="NWB file to write (needs the session's recording for the "
                                                    "mean waveforms, and the pynwb package)")
    e.add_argument("--into-copy", action="store_true",
                   help="with --nwb and a recording in NWB: the file is a copy of the recording with the units added")
    e.add_argument("--recording", metavar="FILE", help="where the session's recording is now, if it moved")
    e.add_argument("--waveform-events", type=int, metavar="N", default=500,
                   help="most events per unit averaged into its mean waveform (default 500)")
    e.add_argument("--quiet", action="store_true", help="no progress bar")
    add_recording_options(e)
    e.set_defaults(func=run_export_command, inputs=("session", "recording"))


def _export_nwb(args: argparse.Namespace, bar: TextProgress) -> Path:
    from rigside.core.exports.nwb import export_nwb, is_nwb_file
    from rigside.core.io.atomic import check_output
    from rigside.core.io.recording import open_recording
    from rigside.core.units.session import RecordingMoved, load_session

    check_output(args.nwb, suffixes=(".nwb",))
    try:
        session = load_session(args.session, recording_path_override=args.recording)
    except RecordingMoved as exc:
        raise ParamError(f"{exc}; give its new place with --recording") from None
    source = session.recording.path
    if args.into_copy and not is_nwb_file(source):
        raise ParamError(f"--into-copy needs a session whose recording is an NWB file, got {source!r}")
    with closing(open_recording(source, **recording_options(args))) as rec:
        return export_nwb(session, rec, args.nwb, into_copy=source if args.into_copy else None,
                          n_waveforms=args.waveform_events, progress=bar)


def run_export_command(args: argparse.Namespace) -> int:
    from rigside.core.exports.units import export_units
    from rigside.core.units.session import load_session

    if args.out is None and args.nwb is None:
        raise ParamError("export needs --out DIR, --nwb OUT.nwb or both, got neither")
    if args.into_copy and args.nwb is None:
        raise ParamError("--into-copy needs --nwb OUT.nwb, got no --nwb")
    out = check_folder(args.out, "export") if args.out is not None else None
    with TextProgress(not args.quiet) as bar:
        if args.nwb is not None:
            written_nwb = _export_nwb(args, bar)
            print(f"NWB file -> {written_nwb}")
        if out is not None:
            session = load_session(args.session, check_recording=False)
            written = export_units(session, out, bin_ms=args.bin_ms, progress=bar)
            print(f"{sum(len(v) for v in written.values())} files -> {out}")
    return 0
