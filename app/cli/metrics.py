"""`rigside metrics`: the per-unit quality table of a session, headless."""

from __future__ import annotations

import argparse
import sys

from rigside.cli.progressbar import TextProgress
from rigside.core.io.atomic import check_output
from rigside.core.quality.caution import CAUTION
from rigside.core.quality.metric_settings import censored_note, metric_settings


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("metrics", help="write the quality numbers of every unit of a session",
                       description="Compute per-unit quality numbers (rate, refractory violations and "
                                   "contamination, isolation distance, L-ratio, SNR, missed fraction, "
                                   "presence ratio, amplitude drift; on a probe also the unit's position "
                                   "and its drift along the probe) and write one CSV row per unit. "
                                   + CAUTION)
    p.add_argument("session", help="session file (.h5) made by `rigside sort` or the window")
    p.add_argument("--out", required=True, metavar="METRICS.csv", help="CSV file to write")
    p.add_argument("--refractory-ms", type=float, help="refractory period (default from the session, 1.5 ms)")
    p.add_argument("--censored-ms", type=float,
                   help="censored period (default: the session's, else the detection dead time, since shorter "
                        "intervals cannot be seen)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run_metrics, inputs=("session",))


def run_metrics(args: argparse.Namespace) -> int:
    import numpy as np

    from rigside.core.quality.unit_table import sorting_unit_table
    from rigside.core.quality.unit_table_io import DEFAULT_LIMITS, flag_units, undefined_units, write_unit_table_csv
    from rigside.core.signal.pipeline import thresholds_sigma
    from rigside.core.units.session import load_session

    out = check_output(args.out, args.session, suffixes=(".csv",))
    session = load_session(args.session, check_recording=False)
    params = session.params
    if args.refractory_ms is not None:
        params.metrics.refractory_ms = args.refractory_ms
    mp = metric_settings(params, args.censored_ms)
    events, sorting = session.events, session.sorting
    with TextProgress(not args.quiet) as bar:
        table = sorting_unit_table(events, sorting, thresholds_sigma(params, events.sigma_uv), mp, progress=bar)
    write_unit_table_csv(table, out, mp)
    flagged = table["unit"][flag_units(table, DEFAULT_LIMITS)["any"]]
    undefined = table["unit"][np.logical_or.reduce(list(undefined_units(table, DEFAULT_LIMITS).values()))]
    print(f"{len(table['unit'])} units -> {out}; beyond a limit: {', '.join(map(str, flagged)) or 'none'}"
          + (f"; a limited number undefined (not checked): {', '.join(map(str, undefined))}" if len(undefined) else ""))
    print(censored_note(mp))
    print(CAUTION, file=sys.stderr)
    return 0
