"""`rigside suggest`: the ranked merge and split suggestions of a session, with their evidence, as CSV."""

from __future__ import annotations

import argparse
from contextlib import closing

from rigside.cli.common import add_recording_options, recording_options
from rigside.cli.progressbar import TextProgress
from rigside.core.errors import ParamError


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("suggest", help="list unit pairs that may be one neuron and units that may be two",
                       description="Weigh every unit's most overlapping neighbours of its channel group as "
                                   "merges (mean-waveform likeness, cross-correlogram refractory dip, "
                                   "feature overlap, continuity over time) and every unit as a split (two- "
                                   "against one-part mixture, refractory violations, detection channels), "
                                   "and write them ranked, one CSV row each with its numbers and score. "
                                   "Suggestions rejected in the window are left out. The session is only read.")
    p.add_argument("session", help="session file (.h5) made by `rigside sort` or the window")
    p.add_argument("--out", required=True, metavar="SUGGESTIONS.csv", help="CSV file to write")
    p.add_argument("--recording", metavar="FILE", help="where the session's recording is now, if it moved")
    p.add_argument("--without-recording", action="store_true",
                   help="compare features only: no mean waveforms (the recording is not read)")
    p.add_argument("--top", type=int, metavar="N", help="write at most N suggestions (default: all above the score)")
    p.add_argument("--min-score", type=float, metavar="S", default=0.25,
                   help="lowest score written, 0 to 1 (default 0.25)")
    p.add_argument("--waveform-events", type=int, metavar="N", default=200,
                   help="most events per unit averaged into its mean waveform (default 200)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    add_recording_options(p)
    p.set_defaults(func=run_suggest, inputs=("session", "recording"))


def run_suggest(args: argparse.Namespace) -> int:
    from rigside.core.io.atomic import check_output
    from rigside.core.io.recording import open_recording
    from rigside.core.quality.metric_settings import metric_settings
    from rigside.core.quality.suggestions import SuggestParams, mean_waveforms, suggest, write_suggestions_csv
    from rigside.core.units.session import RecordingMoved, check_recording_content, load_session

    out = check_output(args.out, args.session, args.recording, suffixes=(".csv",))
    if args.without_recording and args.recording is not None:
        raise ParamError("--recording and --without-recording exclude each other, got both")
    settings = SuggestParams(top=args.top, min_score=args.min_score, waveform_events=args.waveform_events)
    settings.validate()
    try:
        session = load_session(args.session, recording_path_override=args.recording,
                               check_recording=not args.without_recording)
    except RecordingMoved as exc:
        raise ParamError(f"{exc}; give its new place with --recording, or use --without-recording") from None
    sorting = session.sorting
    with TextProgress(not args.quiet) as bar:
        waveforms = None
        if not args.without_recording:
            check_recording_content(session, progress=lambda f, m: bar(0.3 * f, m))
            with closing(open_recording(session.recording.path, **recording_options(args))) as rec:
                big = [u for u, n in sorting.counts().items() if n >= settings.min_events]
                waveforms = mean_waveforms(rec, session.events, session.params, sorting, big,
                                           settings.waveform_events, lambda f, m: bar(0.3 + 0.2 * f, m))
        found = suggest(session.events, sorting, metric_settings(session.params), waveforms, settings,
                        progress=lambda f, m: bar(0.5 + 0.5 * f, m), cluster=session.params.cluster)
    write_suggestions_csv(out, found)
    merges = sum(s.kind == "merge" for s in found)
    print(f"{merges} merge and {len(found) - merges} split suggestions -> {out}"
          + ("" if waveforms is not None else " (waveforms not compared: --without-recording)"))
    return 0
