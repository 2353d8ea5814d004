"""`rigside synth`: practice recordings with known ground truth, from options or a settings file."""

from __future__ import annotations

import argparse

from rigside.cli.progressbar import TextProgress
from rigside.core.io.atomic import check_output
from rigside.core.synthetic.settings import COLOURS, SynthSettings, settings_path

DEFAULTS = SynthSettings()
PAIRS = {"snr": "snr", "amplitude_uv": "amplitude_uv", "rates": "rates_hz"}
SINGLE = {"seconds": "seconds", "channels": "channels", "group_size": "group_size", "rate": "rate_hz",
          "units": "units", "noise_uv": "noise_uv", "noise_colour": "noise_colour", "hum_uv": "hum_uv",
          "drift_uv": "drift_uv", "artefacts_per_min": "artefacts_per_min",
          "overlap_fraction": "overlap_fraction", "seed": "seed"}
"""Command-line option (argparse name) -> settings key."""


def register(sub: argparse._SubParsersAction) -> None:
    d = DEFAULTS
    s = sub.add_parser("synth", help="write a synthetic practice recording with known ground truth",
                       description="Write a synthetic recording (4-wire bundles, 3 units each, artefacts, hum, "
                                   "drift, coloured noise by default: the demo scenario) as int16 raw data with "
                                   "its metadata, ground truth and settings (OUT's stem + .synth.toml). Options "
                                   "override the settings file; the same settings and seed give the same bytes.")
    s.add_argument("out", help="raw file to write (e.g. practice.bin); metadata, truth and settings go beside it")
    s.add_argument("--settings", metavar="FILE.toml", help="practice settings file (as written beside a recording)")
    s.add_argument("--seconds", type=float, help=f"length in seconds (default {d.seconds:g})")
    s.add_argument("--channels", type=int, help=f"channel count (default {d.channels})")
    s.add_argument("--group-size", type=int, metavar="N", help=f"wires per bundle (default {d.group_size})")
    s.add_argument("--rate", type=float, metavar="HZ", help=f"sampling rate (default {d.rate_hz:g})")
    s.add_argument("--units", type=int, metavar="N", help="number of true units (default 3 per bundle; 0: noise only)")
    s.add_argument("--snr", type=float, nargs=2, metavar=("LOW", "HIGH"),
                   help="peak amplitudes as multiples of the expected noise sigma in the 300-6000 Hz band")
    s.add_argument("--amplitude-uv", type=float, nargs=2, metavar=("LOW", "HIGH"),
                   help=f"raw peak amplitudes in uV (default {d.amplitude_uv[0]:g} {d.amplitude_uv[1]:g}; "
                        "--snr replaces it)")
    s.add_argument("--rates", type=float, nargs=2, metavar=("LOW", "HIGH"),
                   help=f"firing rates in Hz (default {d.rates_hz[0]:g} {d.rates_hz[1]:g})")
    s.add_argument("--noise-uv", type=float, metavar="SD", help=f"SD of the white background noise in uV "
                   f"(default {d.noise_uv:g})")
    s.add_argument("--noise-colour", choices=COLOURS, help=f"background noise colour (default {d.noise_colour})")
    s.add_argument("--hum-uv", type=float, metavar="UV", help=f"largest 50 Hz mains hum in uV (default {d.hum_uv:g})")
    s.add_argument("--drift-uv", type=float, metavar="UV", help=f"largest slow baseline drift in uV "
                   f"(default {d.drift_uv:g})")
    s.add_argument("--artefacts-per-min", type=float, metavar="N",
                   help=f"movement artefacts per minute (default {d.artefacts_per_min:g})")
    s.add_argument("--overlap-fraction", type=float, metavar="F",
                   help="share of spikes given a near-coincident spike of another unit of the bundle (default 0)")
    s.add_argument("--seed", type=int, help=f"random seed (default {d.seed})")
    s.add_argument("--overwrite", action="store_true", help="replace existing files of the same name")
    s.add_argument("--quiet", action="store_true", help="no progress bar")
    s.set_defaults(func=run_synth, inputs=("settings",))


def settings_from_args(args: argparse.Namespace) -> SynthSettings:
    """The settings file (or the defaults) with every option given on the command line applied."""
    values = SynthSettings.load(args.settings).to_dict() if args.settings else {}
    for option, key in SINGLE.items():
        if getattr(args, option) is not None:
            values[key] = getattr(args, option)
    for option, key in PAIRS.items():
        if getattr(args, option) is not None:
            values[key] = list(getattr(args, option))
    if args.amplitude_uv is not None:
        values.pop("snr", None)   # an amplitude range given here wins over an SNR range in the file
    return SynthSettings.from_dict(values)


def run_synth(args: argparse.Namespace) -> int:
    from rigside.core.synthetic.synth import write_practice

    out = check_output(args.out, args.settings)
    check_output(settings_path(out), args.settings)   # the settings written beside OUT never replace the input
    settings = settings_from_args(args)
    with TextProgress(not args.quiet) as bar:
        sc = write_practice(out, settings, progress=bar, overwrite=args.overwrite)
    print(f"{len(sc.spike_sample)} spikes of {len(sc.units)} units, {settings.channels} channels, "
          f"{settings.seconds:g} s -> {out} (+ metadata, ground truth and settings)")
    return 0
