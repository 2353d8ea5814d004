"""Options shared by the commands: recording layout, pipeline parameters, output safety."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import TYPE_CHECKING

from rigside.core.errors import ParamError
from rigside.core.io.layout import DTYPES
from rigside.core.params import POLARITIES, Params

if TYPE_CHECKING:
    from rigside.core.io.recording import Recording


def add_recording_options(p: argparse.ArgumentParser) -> None:
    """Options describing a raw recording (override its metadata file)."""
    g = p.add_argument_group("recording layout (raw binary files; override the metadata file; NWB files describe "
                             "themselves)")
    g.add_argument("--channels", type=int, help="number of interleaved channels")
    g.add_argument("--rate", type=float, metavar="HZ", help="sampling rate in Hz")
    g.add_argument("--dtype", choices=DTYPES, help="sample type (little-endian)")
    g.add_argument("--gain-uv", type=float, metavar="G", help="microvolts per stored unit")
    g.add_argument("--offset-uv", type=float, metavar="O", help="microvolts added after the gain")
    g.add_argument("--offset-counts", type=float, metavar="C",
                   help="stored value of 0 uV, subtracted before the gain (e.g. 32768 for centred uint16)")
    g.add_argument("--header-bytes", type=int, metavar="N", help="bytes to skip at the start of the file")
    g.add_argument("--group-size", type=int, metavar="K", help="K consecutive channels form one group")
    g.add_argument("--dataset", help="HDF5 dataset path (samples x channels)")
    g.add_argument("--series", metavar="NAME", help="NWB ElectricalSeries (name or path) when the file holds several")
    g.add_argument("--allow-external", action="store_true", default=None,
                   help="read HDF5 samples kept in other files (external links, external storage, virtual datasets)")
    g.add_argument("--positions", metavar="FILE.csv",
                   help="probe site positions (columns channel,x_um,y_um and optionally shank; overrides the "
                        "metadata file's [probe] table or the HDF5 attributes)")


def add_param_options(p: argparse.ArgumentParser) -> None:
    """Options for filtering and detection; a TOML file gives defaults, options win."""
    g = p.add_argument_group("parameters")
    g.add_argument("--params", metavar="FILE.toml", help="parameter file (TOML); options below override it")
    g.add_argument("--band", type=float, nargs=2, metavar=("LOW", "HIGH"),
                   help="band-pass edges in Hz (default 300 6000)")
    g.add_argument("--filter-order", type=int, help="Butterworth order (default 3)")
    g.add_argument("--common-reference", action="store_true", default=None,
                   help="subtract the per-group median across channels after filtering")
    thr = g.add_mutually_exclusive_group()
    thr.add_argument("--threshold", type=float, metavar="K", help="threshold in multiples of noise sigma (default 4.5)")
    thr.add_argument("--threshold-uv", type=float, metavar="V", help="threshold in microvolts")
    g.add_argument("--polarity", choices=POLARITIES, help="spike polarity (default negative)")
    g.add_argument("--dead-time-ms", type=float, metavar="MS", help="dead time in ms (default 1)")
    g.add_argument("--radius-um", type=float, metavar="UM",
                   help="probe neighbourhood radius in micrometres (default 50; recordings with site positions)")
    g.add_argument("--workers", type=int, metavar="N",
                   help="threads reading, filtering and cutting chunks, and processes clustering channel "
                        "groups at the same time (default 2)")
    g.add_argument("--chunk-s", type=float, help="chunk length in seconds (default 1)")
    g.add_argument("--quiet", action="store_true", help="no progress bar")


def params_from_args(args: argparse.Namespace) -> Params:
    """Parameters: defaults, then the TOML file, then command-line options."""
    params = Params.load_toml(args.params) if getattr(args, "params", None) else Params()
    if args.band is not None:
        params.filter.low_hz, params.filter.high_hz = args.band
    if args.filter_order is not None:
        params.filter.order = args.filter_order
    if args.common_reference:
        params.filter.common_reference = True
    if args.threshold is not None:
        params.detect.threshold_sigma, params.detect.threshold_uv = args.threshold, None
    if args.threshold_uv is not None:
        params.detect.threshold_uv = args.threshold_uv
    if args.polarity is not None:
        params.detect.polarity = args.polarity
    if args.dead_time_ms is not None:
        params.detect.dead_time_ms = args.dead_time_ms
    if args.radius_um is not None:
        params.probe.radius_um = args.radius_um
    if args.workers is not None:
        params.run.workers = args.workers
    if args.chunk_s is not None:
        params.run.chunk_s = args.chunk_s
    params.validate()
    return params


def check_folder(path: str, what: str) -> Path:
    """An output folder that is not a file and whose parent exists (it may be created), or :class:`ParamError`
    naming it ``what`` (e.g. "export")."""
    out = Path(path)
    if out.exists() and not out.is_dir():
        raise ParamError(f"{what} must be a folder, got the file {str(out)!r}")
    if not out.parent.exists():
        raise ParamError(f"{what} folder's parent must exist, got {str(out.parent)!r}")
    return out


def open_from_args(args: argparse.Namespace, path: str | None = None) -> Recording:
    """Open the command's recording with the layout options applied."""
    from rigside.core.io.recording import open_recording
    return open_recording(path or args.recording, **recording_options(args))


def recording_options(args: argparse.Namespace) -> dict:
    """The layout options as keyword arguments for :func:`rigside.core.io.recording.open_recording`."""
    return {k: v for k, v in (("channels", args.channels), ("rate_hz", args.rate), ("dtype", args.dtype),
                              ("gain_uv", args.gain_uv), ("offset_uv", args.offset_uv),
                              ("offset_counts", args.offset_counts), ("header_bytes", args.header_bytes),
                              ("group_size", args.group_size), ("dataset", args.dataset), ("series", args.series),
                              ("allow_external", args.allow_external or None),
                              ("positions", args.positions)) if v is not None}


def command_inputs(args: argparse.Namespace) -> list[str]:
    """Every input file of a command: the paths in its ``inputs`` options, with each
    recording's metadata and ground-truth files."""
    from rigside.core.io.recording import side_files
    paths: list[str] = []
    for name in getattr(args, "inputs", ()):
        value = getattr(args, name, None)
        for v in ([value] if isinstance(value, str) else value or []):
            paths.append(v)
            if name in ("recording", "recordings"):
                paths += [str(f) for f in side_files(v)]
    return paths + ([args.positions] if getattr(args, "positions", None) else [])


