"""`rigside detect` and `rigside synth`."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import numpy as np

from core import __version__
from core.atomic import atomic_write
from core.errors import ParamError
from core.noise import estimate_noise
from core.pipeline import NOISE_SHARE, detect, thresholds_sigma
from core.synth import write_synth

from .cli_common import add_param_options, add_recording_options, check_output, open_from_args, params_from_args
from .progressbar import TextProgress


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("detect", help="filter, measure noise and detect events in a recording",
                       description="Band-pass the recording, estimate each channel's robust noise and "
                                   "write the detected events (CSV or HDF5) and an optional JSON summary.")
    p.add_argument("recording", help="raw binary (with metadata file or layout options) or HDF5 recording")
    p.add_argument("--out", required=True, metavar="EVENTS.csv|EVENTS.h5", help="event file to write")
    p.add_argument("--summary", metavar="SUMMARY.json", help="JSON summary: parameters and per-channel noise, threshold, counts")
    p.add_argument("--keep-artefacts", action="store_true", help="also write events flagged as artefacts")
    add_recording_options(p)
    add_param_options(p)
    p.set_defaults(func=run_detect)

    s = sub.add_parser("synth", help="write a synthetic recording with known ground truth",
                       description="Write the demo scenario (4-wire bundles, 3 units each, artefacts, hum, "
                                   "drift, coloured noise) as int16 raw data with its metadata and ground truth.")
    s.add_argument("out", help="raw file to write (e.g. demo.bin); metadata and truth files go beside it")
    s.add_argument("--seconds", type=float, default=60.0, help="length in seconds (default 60)")
    s.add_argument("--channels", type=int, default=16, help="channel count (default 16)")
    s.add_argument("--rate", type=float, default=30000.0, metavar="HZ", help="sampling rate (default 30000)")
    s.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    s.add_argument("--quiet", action="store_true", help="no progress bar")
    s.set_defaults(func=run_synth)


def run_detect(args: argparse.Namespace) -> int:
    out = check_output(args.out, args.recording, suffixes=(".csv", ".h5", ".hdf5"))
    if args.summary:
        check_output(args.summary, args.recording, suffixes=(".json",))
    params = params_from_args(args)
    rec = open_from_args(args)
    params.validate(rec.rate_hz)
    bar = TextProgress(not args.quiet)
    try:
        noise = estimate_noise(rec, params, progress=lambda f, m: bar(f * NOISE_SHARE, m))
        events = detect(rec, params, progress=bar, noise=noise)
    finally:
        bar.close()
        rec.close()
    keep = events.mask(threshold_sigma=None if params.detect.threshold_uv is not None else params.detect.threshold_sigma,
                       threshold_uv=params.detect.threshold_uv, include_artefacts=args.keep_artefacts)
    chosen = events.subset(keep)
    if out.suffix.lower() == ".csv":
        chosen.write_csv(out)
    else:
        chosen.write_h5(out)
    if args.summary:
        write_summary(Path(args.summary), rec, params, events, noise)
    print(f"{int(keep.sum())} events on {rec.n_channels} channels in {rec.duration_s:.2f} s -> {out}")
    return 0


def write_summary(path: Path, rec, params, events, noise) -> None:
    """JSON summary: parameters, duration, rate and per-channel noise, threshold and counts."""
    thr = thresholds_sigma(params, events.sigma_uv)
    counts = events.counts(threshold_sigma=np.where(np.isfinite(thr), thr, np.inf))
    doc = {
        "program": "rigside", "version": __version__, "recording": rec.describe(),
        "parameters": params.to_dict(), "duration_s": rec.duration_s, "rate_hz": rec.rate_hz,
        "artefact_events": int((events.artefact & events.mask(threshold_sigma=thr, include_artefacts=True)).sum()),
        "channels": [{"channel": c, "group": int(rec.channel_group[c]), "noise_uv": float(events.sigma_uv[c]),
                      "threshold_uv": float(thr[c] * events.sigma_uv[c]) if np.isfinite(thr[c]) and events.sigma_uv[c] > 0 else None,
                      "events": int(counts[c]), "rate_hz": float(counts[c] / rec.duration_s),
                      "flag": noise.bad.get(c)} for c in range(rec.n_channels)],
    }
    atomic_write(path, lambda tmp: tmp.write_text(json.dumps(doc, indent=2)))


def run_synth(args: argparse.Namespace) -> int:
    out = check_output(args.out)
    if not args.seconds > 0 or args.seconds > 24 * 3600:
        raise ParamError(f"synthetic length must be between 0 and 86400 s, got {args.seconds:g} s")
    if not 1 <= args.channels <= 1024:
        raise ParamError(f"synthetic channel count must be from 1 to 1024, got {args.channels}")
    if not 1000 <= args.rate <= 100000:
        raise ParamError(f"synthetic sampling rate must be between 1000 and 100000 Hz, got {args.rate:g} Hz")
    bar = TextProgress(not args.quiet)
    try:
        sc = write_synth(out, args.seconds, args.channels, args.seed, args.rate, progress=bar)
    finally:
        bar.close()
    print(f"{len(sc.spike_sample)} spikes of {len(sc.units)} units, {args.channels} channels, "
          f"{args.seconds:g} s -> {out} (+ metadata and ground truth)")
    return 0
