"""`rigside audit`: check an earlier sorting against a fresh look at the same raw data."""

from __future__ import annotations

import argparse
from contextlib import closing

from rigside.cli.common import add_param_options, add_recording_options, open_from_args, params_from_args
from rigside.cli.progressbar import TextProgress
from rigside.core.errors import ParamError
from rigside.core.io.atomic import check_output

PARAM_OPTIONS = ("params", "band", "filter_order", "common_reference", "threshold", "threshold_uv",
                 "polarity", "dead_time_ms")
"""Options that change detection; a session brings its own, so they conflict with --session."""


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("audit", help="audit an earlier sorting against freshly sorted units",
                       description="Import earlier spike times, match them to events re-detected in the raw "
                                   "data and to fresh units (a session's curated units, or a first-pass "
                                   "clustering), and write an HTML report and a CSV table, one row per "
                                   "imported unit. See docs/audit.md for the accepted files and columns.")
    p.add_argument("recording", help="raw binary (with metadata file or layout options), HDF5 or NWB recording")
    p.add_argument("--sorted", required=True, metavar="SPIKES",
                   help="earlier spike times: .csv/.txt, .npy, .npz, .h5/.hdf5 or .nwb")
    p.add_argument("--session", metavar="SESSION.h5",
                   help="compare with this session's units (default: a fresh first-pass clustering)")
    p.add_argument("--out", required=True, metavar="REPORT.html", help="HTML report to write")
    p.add_argument("--table", required=True, metavar="AUDIT.csv", help="CSV table to write (one row per unit)")
    g = p.add_argument_group("imported spikes")
    g.add_argument("--sorted-rate", type=float, metavar="HZ",
                   help="sampling rate of a 'sample' column (default: the recording's rate)")
    g.add_argument("--sorted-group", metavar="GROUP", help="HDF5 group holding the spikes (default: the root)")
    g.add_argument("--sorted-offset-s", type=float, default=0.0, metavar="S",
                   help="subtract S seconds from every imported time (clock started before the recording)")
    g.add_argument("--tolerance-ms", type=float, default=0.5, metavar="MS",
                   help="largest distance between matched spikes (default 0.5 ms)")
    add_recording_options(p)
    add_param_options(p)
    p.set_defaults(func=run_audit_command, inputs=("recording", "params", "sorted", "session"))


def run_audit_command(args: argparse.Namespace) -> int:
    from rigside.core.audit.html_report import write_audit_report
    from rigside.core.audit.run import CAUTION, AuditSettings, FreshUnits, first_pass_units, run_audit
    from rigside.core.audit.table import write_audit_csv
    from rigside.core.io.spike_import_files import load_spikes
    from rigside.core.units.session import check_recording_content, load_session

    protected = [x for x in (args.recording, args.sorted, args.session) if x]
    out = check_output(args.out, *protected, suffixes=(".html", ".htm"))
    table = check_output(args.table, *protected, suffixes=(".csv",))
    if out.resolve() == table.resolve():
        raise ParamError(f"report and table must be different files, got {str(out)!r} twice")
    if args.session:
        given = [f"--{name.replace('_', '-')}" for name in PARAM_OPTIONS
                 if getattr(args, name, None) not in (None, False)]
        if given:
            raise ParamError(f"detection options must not be given with --session (the session's own "
                             f"parameters are used), got {', '.join(given)}")
    settings = AuditSettings(tolerance_ms=args.tolerance_ms)
    settings.validate()
    params = params_from_args(args)
    with closing(open_from_args(args)) as rec, TextProgress(not args.quiet) as bar:
        spikes = load_spikes(args.sorted, rate_hz=args.sorted_rate or rec.rate_hz, group=args.sorted_group,
                             time_offset_s=args.sorted_offset_s)
        spikes.check_within(rec.duration_s, rec.rate_hz)
        if args.session:
            session = load_session(args.session, recording_path_override=args.recording)
            check_recording_content(session, progress=lambda f, m: bar(0.2 * f, m))
            session.params.run.workers = params.run.workers
            fresh = FreshUnits.from_session(session)
        else:
            params.validate(rec.rate_hz)
            fresh = first_pass_units(rec, params, progress=lambda f, m: bar(0.5 * f, m))
        base = 0.0 if args.session else 0.5
        result = run_audit(rec, spikes, fresh, settings,
                           progress=lambda f, m: bar(base + (1 - base) * f, m))
    write_audit_csv(result, table, CAUTION)
    write_audit_report(result, out)
    print(f"{len(result.imported_ids)} imported units ({len(spikes)} spikes) audited against "
          f"{len(result.fresh_ids)} units of the {fresh.source} -> {out}, {table}")
    if spikes.empty_units:
        print(f"note: {spikes.empty_note()}")
    return 0
