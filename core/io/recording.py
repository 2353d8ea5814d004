"""Recording readers behind one small interface.

A reader gives the sample count, channel count, sampling rate, channel groups and a
``read(start, stop)`` returning microvolts as float32 (samples x channels). Files are
opened read-only (positional reads or HDF5 read mode) and never written. A new format is a
new subclass of :class:`Recording` plus one line in :func:`open_recording`.

Raw binary files are described by a metadata file of our own schema beside the data,
``<name>.rigside.toml``::

    [recording]
    schema = 1
    dtype = "int16"        # int16, uint16, int32 or float32, little-endian
    channels = 16
    rate_hz = 30000.0
    gain_uv = 0.195        # microvolts per stored unit
    offset_uv = 0.0        # added after the gain
    offset_counts = 0      # stored value of 0 uV, subtracted before the gain (32768: centred uint16)
    header_bytes = 0       # bytes to skip at the start of the file
    [[group]]
    name = "bundle A"
    channels = [0, 1, 2, 3]
    [probe]                # optional: site positions, one entry per channel
    x_um = [0.0, 20.0, 0.0, 20.0]
    y_um = [0.0, 0.0, 20.0, 20.0]
    shank = [0, 0, 0, 0]   # optional (one shank)

With positions and no groups, each shank is one group (see :mod:`rigside.core.io.positions`).
"""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
import tomli_w

from rigside.core.errors import RecordingError
from rigside.core.io import positions as sites
from rigside.core.io.atomic import atomic_write
from rigside.core.io.columns import take_channels
from rigside.core.io.h5safe import stored_dataset
from rigside.core.io.hdf5_datasets import choose_dataset
from rigside.core.io.layout import DTYPES, Layout, check_groups, groups_of_size, is_integer, is_number  # noqa: F401 (re-exported)
from rigside.core.io.nwb_recording import NWBRecording, nwb_candidates
from rigside.core.io.positional import PositionalFile
from rigside.core.io.recording_base import Recording  # noqa: F401 (re-exported)
from rigside.core.textparse import parse_toml

META_SUFFIX = ".rigside.toml"
TRUTH_SUFFIXES = (".truth.csv", ".truth_units.csv")


class RawRecording(Recording):
    """Interleaved little-endian binary samples, read-only."""

    def __init__(self, path: str | Path, layout: Layout):
        layout.validate()
        self.path = Path(path)
        self.layout = layout
        self.n_channels = layout.channels
        self.rate_hz = float(layout.rate_hz)
        self.float_data = layout.dtype == "float32"
        try:
            size = self.path.stat().st_size
        except FileNotFoundError:
            raise RecordingError(f"recording file must exist, got {str(path)!r}") from None
        item = np.dtype(layout.dtype).itemsize
        body = size - layout.header_bytes
        frame = item * layout.channels
        how = f"set --header-bytes or header_bytes in {self.path.stem}{META_SUFFIX}"
        if body <= 0:
            raise RecordingError(f"recording file must hold samples after its {layout.header_bytes}-byte header, "
                                 f"got {size} bytes in {str(path)!r} ({how})")
        if body % frame:
            raise RecordingError(f"file size after the header must be a multiple of channels x item size "
                                 f"({layout.channels} x {item} = {frame} bytes), got {body} bytes "
                                 f"(a header of {body % frame} + k x {frame} bytes? {how}; or a truncated "
                                 f"file, wrong channel count or sample type)")
        self.n_samples = body // frame
        self._dtype = np.dtype(layout.dtype).newbyteorder("<")
        self._frame = frame
        self._file = PositionalFile(self.path)
        self._init_groups(layout.groups, layout.group_names)
        if layout.x_um is not None:
            self.set_positions(layout.x_um, layout.y_um, layout.shank)

    def read_stored(self, start, stop, channels=None):
        """Positional reads (thread-safe); a file that shrank gives RecordingError, not a crash."""
        block = np.empty((stop - start, self.n_channels), dtype=self._dtype)
        view = memoryview(block.reshape(-1).view(np.uint8))
        offset, done = self.layout.header_bytes + start * self._frame, 0
        while done < len(view):
            got = self._file.readinto(view[done:], offset + done)
            if got == 0:
                raise RecordingError(f"recording {str(self.path)!r} must keep its size while it is read, got an "
                                     f"early end at sample {start + done // self._frame} of {self.n_samples}")
            done += got
        return take_channels(block, channels)

    def close(self) -> None:
        self._file.close()


class HDF5Recording(Recording):
    """A 2-D dataset (samples x channels) with attributes ``rate_hz`` (required),
    ``gain_uv``, ``offset_uv`` and optionally ``channel_group`` (group index per channel) and
    ``x_um``, ``y_um``, ``shank`` (site positions, one per channel)."""

    def __init__(self, path: str | Path, dataset: str | None = None, rate_hz: float | None = None,
                 gain_uv: float | None = None, groups: list[list[int]] | None = None,
                 allow_external: bool = False):
        self.path = Path(path)
        self.allow_external = allow_external
        try:
            self._file = h5py.File(self.path, "r")
        except FileNotFoundError:
            raise RecordingError(f"recording file must exist, got {str(path)!r}") from None
        except OSError as exc:
            raise RecordingError(f"HDF5 recording must be a readable HDF5 file, got {str(path)!r}: {exc}") from None
        try:
            self._setup(dataset, rate_hz, gain_uv, groups)
        except RecordingError:
            self._file.close()
            raise
        except (OSError, RuntimeError, KeyError, ValueError, TypeError) as exc:
            self._file.close()
            raise RecordingError(f"HDF5 recording must be a readable HDF5 file, got {str(path)!r}: {exc}") from None

    def _setup(self, dataset, rate_hz, gain_uv, groups) -> None:
        path = self.path
        name = choose_dataset(self._file, dataset)
        self._ds = stored_dataset(self._file, name, self.allow_external, RecordingError)
        attrs = self._ds.attrs
        rate = rate_hz if rate_hz is not None else attrs.get("rate_hz", self._file.attrs.get("rate_hz"))
        if rate is None:
            raise RecordingError(f"HDF5 recording must carry a 'rate_hz' attribute (or give --rate), "
                                 f"got none in {str(path)!r}")
        gain = gain_uv if gain_uv is not None else attrs.get("gain_uv", 1.0)
        for what, v in (("rate_hz", rate), ("gain_uv", gain), ("offset_uv", attrs.get("offset_uv", 0.0))):
            if not is_number(v):
                raise RecordingError(f"HDF5 recording attribute {what} must be one number, got {str(v)[:40]!r}")
        layout = Layout(channels=int(self._ds.shape[1]), rate_hz=float(rate), dtype="float32", gain_uv=float(gain),
                        offset_uv=float(attrs.get("offset_uv", 0.0)))
        layout.validate()
        self.layout = layout
        self.n_samples, self.n_channels = (int(s) for s in self._ds.shape)
        if self.n_samples == 0:
            raise RecordingError(f"HDF5 recording must hold at least one sample, got 0 in {str(path)!r}")
        self.rate_hz = layout.rate_hz
        self.float_data = self._ds.dtype.kind == "f"
        if groups is None and "channel_group" in attrs:
            cg = np.asarray(attrs["channel_group"]).astype(int)
            if cg.shape != (self.n_channels,):
                raise RecordingError(f"attribute channel_group must hold one group per channel ({self.n_channels}), "
                                     f"got shape {cg.shape}")
            groups = [np.flatnonzero(cg == g).tolist() for g in np.unique(cg)]
        self._init_groups(groups, None)
        found = sites.probe_from_attrs(attrs, self.n_channels, repr(str(path)))
        if found is not None:
            self.set_positions(*found)

    def read_stored(self, start, stop, channels=None):
        try:
            block = self._ds[start:stop]
        except (OSError, RuntimeError) as exc:
            raise RecordingError(f"HDF5 recording must be readable at samples {start}..{stop}, got {exc}") from None
        return take_channels(block, channels)

    def close(self) -> None:
        self._file.close()


def metadata_path(path: str | Path) -> Path | None:
    """The metadata file beside ``path`` (``name.ext.rigside.toml`` or ``name.rigside.toml``)."""
    p = Path(path)
    for cand in (p.with_name(p.name + META_SUFFIX), p.with_name(p.stem + META_SUFFIX)):
        if cand.exists():
            return cand
    return None


def side_files(path: str | Path) -> list[Path]:
    """The existing files that belong to a recording: its metadata and ground-truth files."""
    p = Path(path)
    found = [metadata_path(p)] + [p.with_name(p.stem + s) for s in TRUTH_SUFFIXES]
    return [f for f in found if f is not None and f.exists()]


def read_metadata(meta: str | Path) -> Layout:
    """Parse a metadata file of our schema into a :class:`Layout`."""
    try:
        text = Path(meta).read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise RecordingError(f"metadata file must be valid TOML (UTF-8 text), got {str(meta)!r}: {exc}") from None
    data = parse_toml(text, f"metadata file {str(meta)!r}", RecordingError)
    rec = data.get("recording")
    if not isinstance(rec, dict):
        raise RecordingError(f"metadata file must have a [recording] table, got none in {str(meta)!r}")
    known = {"schema", "dtype", "channels", "rate_hz", "gain_uv", "offset_uv", "offset_counts", "header_bytes"}
    probe = sites.probe_from_table(data["probe"], repr(str(meta))) if "probe" in data else (None, None, None)
    unknown = set(rec) - known
    if unknown:
        raise RecordingError(f"metadata [recording] keys must be among {', '.join(sorted(known))}, "
                             f"got {', '.join(sorted(unknown))}")
    if not (is_integer(rec.get("schema", 1)) and rec.get("schema", 1) == 1):
        raise RecordingError(f"metadata schema must be 1, got {rec['schema']!r} in {str(meta)!r} (a newer rigside?)")
    for key in ("channels", "rate_hz"):
        if key not in rec:
            raise RecordingError(f"metadata [recording] must give {key}, got none in {str(meta)!r}")
    groups = data.get("group", [])
    if not isinstance(groups, list) or not all(isinstance(g, dict) and isinstance(g.get("channels"), list)
                                               for g in groups):
        raise RecordingError("metadata [[group]] entries must each hold a channels list, got "
                             f"{groups!r}"[:200])
    layout = Layout(channels=rec["channels"], rate_hz=rec["rate_hz"], dtype=rec.get("dtype", "int16"),
                    gain_uv=rec.get("gain_uv", 1.0), offset_uv=rec.get("offset_uv", 0.0),
                    header_bytes=rec.get("header_bytes", 0), offset_counts=rec.get("offset_counts", 0.0),
                    groups=[g["channels"] for g in groups] or None,
                    group_names=[str(g.get("name", f"group {i}")) for i, g in enumerate(groups)] or None,
                    x_um=probe[0], y_um=probe[1], shank=probe[2])
    if isinstance(layout.rate_hz, int):
        layout.rate_hz = float(layout.rate_hz)
    layout.validate()
    return layout


def write_metadata(path: str | Path, layout: Layout) -> Path:
    """Write the metadata file of our schema beside the raw file ``path`` (atomically)."""
    layout.validate()
    rec = {"schema": 1, "dtype": layout.dtype, "channels": layout.channels, "rate_hz": float(layout.rate_hz),
           "gain_uv": float(layout.gain_uv), "offset_uv": float(layout.offset_uv),
           "offset_counts": float(layout.offset_counts),
           "header_bytes": layout.header_bytes}
    names = layout.group_names or []
    groups = [{"name": str(names[i]) if i < len(names) else f"group {i}", "channels": [int(c) for c in g]}
              for i, g in enumerate(layout.groups or [])]
    table = {"recording": rec} | ({"group": groups} if groups else {})
    if layout.x_um is not None:
        table["probe"] = sites.probe_to_table(layout.x_um, layout.y_um, layout.shank)
    text = "# rigside recording description\n" + tomli_w.dumps(table)
    meta = Path(path).with_name(Path(path).stem + META_SUFFIX)
    return atomic_write(meta, lambda tmp: tmp.write_text(text, encoding="utf-8", newline="\n"))


def _override_positions(rec: Recording, positions: str | Path | None) -> None:
    """Apply a positions CSV file to an opened HDF5 or NWB recording (closing it if the file is refused)."""
    if positions is None:
        return
    try:
        rec.set_positions(*sites.read_positions_csv(positions, rec.n_channels))
    except RecordingError:
        rec.close()
        raise


def open_recording(path: str | Path, *, channels: int | None = None, rate_hz: float | None = None,
                   dtype: str | None = None, gain_uv: float | None = None, offset_uv: float | None = None,
                   group_size: int | None = None, dataset: str | None = None, header_bytes: int | None = None,
                   offset_counts: float | None = None, allow_external: bool = False,
                   series: str | None = None, positions: str | Path | None = None) -> Recording:
    """Open a recording read-only, choosing the reader from the file.

    HDF5 files are recognised by their signature, NWB files among them by their root mark (an
    ``ElectricalSeries``, chosen with ``series`` when there are several: :class:`NWBRecording`);
    anything else is raw binary described by its metadata file, with any keyword given here
    overriding the file. HDF5 samples kept in other files are refused unless ``allow_external``
    (:func:`rigside.core.io.h5safe.stored_dataset`). ``positions`` names a positions CSV file
    (:func:`rigside.core.io.positions.read_positions_csv`) that overrides the positions of the
    metadata file, HDF5 attributes or NWB electrodes table.
    """
    p = Path(path)
    if not p.exists():
        raise RecordingError(f"recording file must exist, got {str(path)!r}")
    if p.is_dir():
        raise RecordingError(f"recording must be a file, got the directory {str(path)!r}")
    if p.stat().st_size == 0:
        raise RecordingError(f"recording file must not be empty, got 0 bytes in {str(path)!r}")
    if h5py.is_hdf5(p) and nwb_candidates(p) is not None:
        for key, value in (("--dataset", dataset), ("--rate", rate_hz), ("--gain-uv", gain_uv)):
            if value is not None:
                raise RecordingError(f"NWB recording takes its {key[2:]} from the file, got {key} {value!r} "
                                     f"(choose the ElectricalSeries with --series)")
        rec = NWBRecording(p, series=series, allow_external=allow_external)
        if group_size is not None:
            rec._init_groups(groups_of_size(rec.n_channels, group_size), None)
        _override_positions(rec, positions)
        return rec
    if series is not None:
        raise RecordingError(f"--series chooses an ElectricalSeries of an NWB file, got {str(path)!r}, "
                             f"which is not NWB")
    if h5py.is_hdf5(p):
        rec = HDF5Recording(p, dataset=dataset, rate_hz=rate_hz, gain_uv=gain_uv, allow_external=allow_external)
        if group_size is not None:
            rec._init_groups(groups_of_size(rec.n_channels, group_size), None)
        _override_positions(rec, positions)
        return rec
    meta = metadata_path(p)
    if meta is not None:
        layout = read_metadata(meta)
    elif channels is None or rate_hz is None:
        raise RecordingError(f"raw recording needs a metadata file ({p.stem}{META_SUFFIX}) or the channel "
                             f"count and sampling rate as options, got neither for {str(path)!r}")
    else:
        layout = Layout(channels=channels, rate_hz=rate_hz)
    for key, value in (("channels", channels), ("rate_hz", rate_hz), ("dtype", dtype),
                       ("gain_uv", gain_uv), ("offset_uv", offset_uv), ("header_bytes", header_bytes),
                       ("offset_counts", offset_counts)):
        if value is not None:
            setattr(layout, key, value)
    if group_size is not None:
        layout.groups = groups_of_size(layout.channels, group_size)
        layout.group_names = None
    if positions is not None:
        layout.validate()
        layout.x_um, layout.y_um, layout.shank = sites.read_positions_csv(positions, layout.channels)
    return RawRecording(p, layout)
