"""Recording readers behind one small interface.

A reader gives the sample count, channel count, sampling rate, channel groups and a
``read(start, stop)`` returning microvolts as float32 (samples x channels). Files are
opened read-only (memory map or HDF5 read mode) and never written. A new format is a
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
    header_bytes = 0       # bytes to skip at the start of the file
    [[group]]
    name = "bundle A"
    channels = [0, 1, 2, 3]
"""

from __future__ import annotations

import hashlib
import math
import mmap
import tomllib
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np
import tomli_w

from .atomic import atomic_write
from .errors import RecordingError

DTYPES = ("int16", "uint16", "int32", "float32")
META_SUFFIX = ".rigside.toml"


@dataclass
class Layout:
    """How to interpret a raw file: everything the metadata file or options say."""

    channels: int
    rate_hz: float
    dtype: str = "int16"
    gain_uv: float = 1.0
    offset_uv: float = 0.0
    header_bytes: int = 0
    groups: list[list[int]] | None = None
    group_names: list[str] | None = None

    def validate(self) -> None:
        if not (isinstance(self.channels, int) and 1 <= self.channels <= 4096):
            raise RecordingError(f"channel count must be an integer from 1 to 4096, got {self.channels!r}")
        if not (isinstance(self.rate_hz, (int, float)) and math.isfinite(self.rate_hz) and 100 <= self.rate_hz <= 1e6):
            raise RecordingError(f"sampling rate must be between 100 Hz and 1 MHz, got {self.rate_hz!r}")
        if self.dtype not in DTYPES:
            raise RecordingError(f"sample type must be one of {', '.join(DTYPES)}, got {self.dtype!r}")
        if not (isinstance(self.gain_uv, (int, float)) and math.isfinite(self.gain_uv) and self.gain_uv != 0):
            raise RecordingError(f"gain must be a finite non-zero number of microvolts, got {self.gain_uv!r}")
        if not (isinstance(self.offset_uv, (int, float)) and math.isfinite(self.offset_uv)):
            raise RecordingError(f"offset must be a finite number of microvolts, got {self.offset_uv!r}")
        if not (isinstance(self.header_bytes, int) and self.header_bytes >= 0):
            raise RecordingError(f"header length must be a non-negative integer, got {self.header_bytes!r}")
        if self.groups is not None:
            check_groups(self.groups, self.channels)


def check_groups(groups: list[list[int]], n_channels: int) -> None:
    """Groups must be non-empty, hold valid channels, and not overlap."""
    seen: set[int] = set()
    for g in groups:
        if not g:
            raise RecordingError("every channel group must hold at least one channel, got an empty group")
        for c in g:
            if not isinstance(c, (int, np.integer)) or not 0 <= c < n_channels:
                raise RecordingError(f"group channels must be integers from 0 to {n_channels - 1}, got {c!r}")
            if c in seen:
                raise RecordingError(f"channel groups must not overlap, got channel {c} twice")
            seen.add(int(c))


def groups_of_size(n_channels: int, size: int) -> list[list[int]]:
    """Consecutive groups of ``size`` channels (the last may be shorter)."""
    if not (isinstance(size, int) and size >= 1):
        raise RecordingError(f"group size must be a positive integer, got {size!r}")
    return [list(range(i, min(i + size, n_channels))) for i in range(0, n_channels, size)]


class Recording:
    """Interface of every reader. Subclasses set the attributes and implement ``read_stored``."""

    path: Path
    n_samples: int
    n_channels: int
    rate_hz: float
    groups: list[np.ndarray]
    group_names: list[str]
    float_data: bool = False

    def _init_groups(self, groups: list[list[int]] | None, names: list[str] | None) -> None:
        groups = groups if groups else [list(range(self.n_channels))]
        check_groups(groups, self.n_channels)
        grouped = {c for g in groups for c in g}
        rest = [c for c in range(self.n_channels) if c not in grouped]
        groups = [list(g) for g in groups] + [[c] for c in rest]
        self.groups = [np.asarray(g, dtype=np.int64) for g in groups]
        names = list(names or [])
        self.group_names = [names[i] if i < len(names) else f"group {i + 1}" for i in range(len(groups))]
        self.channel_group = np.empty(self.n_channels, dtype=np.int32)
        for gi, g in enumerate(self.groups):
            self.channel_group[g] = gi

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.rate_hz

    def read(self, start: int, stop: int, channels: np.ndarray | None = None) -> np.ndarray:
        """Samples ``[start, stop)`` in microvolts, float32, shape (samples, channels)."""
        start, stop = int(start), int(stop)
        if not 0 <= start <= stop <= self.n_samples:
            raise RecordingError(f"read range must lie within 0..{self.n_samples} samples, got {start}..{stop}")
        stored = self.read_stored(start, stop, channels)
        self.check_finite(stored, start, channels)
        return self.scale(stored)

    def read_stored(self, start: int, stop: int, channels: np.ndarray | None = None) -> np.ndarray:
        """Samples ``[start, stop)`` as stored (no gain applied); may be a read-only view."""
        raise NotImplementedError

    def scale(self, stored: np.ndarray) -> np.ndarray:
        """Stored values to microvolts (float32 copy)."""
        out = np.array(stored, dtype=np.float32)
        out *= np.float32(self.layout.gain_uv)
        if self.layout.offset_uv:
            out += np.float32(self.layout.offset_uv)
        return out

    def check_finite(self, stored: np.ndarray, start: int, channels: np.ndarray | None) -> None:
        """Raise if float data holds NaN or Inf (integer data cannot)."""
        if self.float_data and stored.size and not np.isfinite(stored).all():
            bad = np.argwhere(~np.isfinite(stored))[0]
            raise RecordingError(f"recording must hold finite values, got NaN or Inf at sample "
                                 f"{start + int(bad[0])}, channel {int(bad[1]) if channels is None else int(channels[bad[1]])}")

    def release(self, start: int, stop: int) -> None:
        """Hint that samples ``[start, stop)`` will not be needed again soon."""

    def fingerprint(self) -> str:
        """Size plus a SHA-256 of three 1 MiB blocks (start, middle, end) of the file."""
        size = self.path.stat().st_size
        h = hashlib.sha256(str(size).encode())
        block = 1 << 20
        with open(self.path, "rb") as fh:
            for pos in sorted({0, max(0, size // 2 - block // 2), max(0, size - block)}):
                fh.seek(pos)
                h.update(fh.read(block))
        return f"{size}:{h.hexdigest()[:32]}"

    def describe(self) -> dict:
        """Plain description for summaries and sessions."""
        return {"path": str(self.path), "format": type(self).__name__, "n_samples": self.n_samples,
                "n_channels": self.n_channels, "rate_hz": self.rate_hz,
                "groups": [g.tolist() for g in self.groups], "group_names": self.group_names}

    def truth_path(self) -> Path | None:
        """Ground-truth spike file written beside a synthetic recording, if any."""
        p = self.path.with_name(self.path.stem + ".truth.csv")
        return p if p.exists() else None

    def close(self) -> None:
        """Release the file."""


class RawRecording(Recording):
    """Interleaved little-endian binary samples, memory-mapped read-only."""

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
        if body <= 0:
            raise RecordingError(f"recording file must hold samples after its {layout.header_bytes}-byte header, "
                                 f"got {size} bytes in {str(path)!r}")
        if body % frame:
            raise RecordingError(f"file size after the header must be a multiple of channels x item size "
                                 f"({layout.channels} x {item} = {frame} bytes), got {body} bytes "
                                 f"(truncated, or wrong channel count or sample type?)")
        self.n_samples = body // frame
        self._map = np.memmap(self.path, dtype=np.dtype(layout.dtype).newbyteorder("<"), mode="r",
                              offset=layout.header_bytes, shape=(self.n_samples, self.n_channels))
        self._init_groups(layout.groups, layout.group_names)

    def read_stored(self, start, stop, channels=None):
        block = self._map[start:stop] if channels is None else self._map[start:stop, channels]
        return np.asarray(block)

    def release(self, start: int, stop: int) -> None:
        """Drop the pages of ``[start, stop)`` from this process's resident set (they stay in the
        page cache), so streaming a long file keeps resident memory flat."""
        mm = getattr(self._map, "_mmap", None)
        if mm is None or not hasattr(mm, "madvise"):
            return
        frame = self.n_channels * self._map.dtype.itemsize
        page = mmap.PAGESIZE
        skip = self.layout.header_bytes % mmap.ALLOCATIONGRANULARITY  # where the map begins
        a = skip + start * frame
        b = skip + stop * frame
        a0, b0 = (a + page - 1) // page * page, b // page * page
        if b0 > a0:
            mm.madvise(mmap.MADV_DONTNEED, a0, b0 - a0)

    def close(self) -> None:
        mm = getattr(self._map, "_mmap", None)
        self._map = None
        if mm is not None:
            mm.close()


class HDF5Recording(Recording):
    """A 2-D dataset (samples x channels) with attributes ``rate_hz`` (required),
    ``gain_uv``, ``offset_uv`` and optionally ``channel_group`` (group index per channel)."""

    def __init__(self, path: str | Path, dataset: str | None = None, rate_hz: float | None = None,
                 gain_uv: float | None = None, groups: list[list[int]] | None = None):
        self.path = Path(path)
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
        name = dataset or _first_2d_dataset(self._file)
        if name is None or name not in self._file or not isinstance(self._file[name], h5py.Dataset):
            raise RecordingError(f"HDF5 recording must hold a 2-D dataset (samples x channels), "
                                 f"got none named {dataset!r} in {str(path)!r}" if dataset else
                                 f"HDF5 recording must hold a 2-D dataset (samples x channels), got none in {str(path)!r}")
        self._ds = self._file[name]
        if self._ds.ndim != 2 or self._ds.dtype.kind not in "iuf":
            raise RecordingError(f"HDF5 recording dataset must be 2-D numeric (samples x channels), "
                                 f"got shape {self._ds.shape} of {self._ds.dtype}")
        attrs = self._ds.attrs
        rate = rate_hz if rate_hz is not None else attrs.get("rate_hz", self._file.attrs.get("rate_hz"))
        layout = Layout(channels=int(self._ds.shape[1]), rate_hz=float(rate) if rate is not None else float("nan"),
                        dtype="float32", gain_uv=float(gain_uv if gain_uv is not None else attrs.get("gain_uv", 1.0)),
                        offset_uv=float(attrs.get("offset_uv", 0.0)))
        if rate is None:
            raise RecordingError(f"HDF5 recording must carry a 'rate_hz' attribute (or give --rate), got none in {str(path)!r}")
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

    def read_stored(self, start, stop, channels=None):
        try:
            block = self._ds[start:stop]
        except (OSError, RuntimeError) as exc:
            raise RecordingError(f"HDF5 recording must be readable at samples {start}..{stop}, got {exc}") from None
        return block if channels is None else block[:, channels]

    def close(self) -> None:
        self._file.close()


def _first_2d_dataset(f: h5py.File) -> str | None:
    found: list[str] = []

    def visit(name, obj):
        if isinstance(obj, h5py.Dataset) and obj.ndim == 2 and not found:
            found.append(name)
    f.visititems(visit)
    return found[0] if found else None


def metadata_path(path: str | Path) -> Path | None:
    """The metadata file beside ``path`` (``name.ext.rigside.toml`` or ``name.rigside.toml``)."""
    p = Path(path)
    for cand in (p.with_name(p.name + META_SUFFIX), p.with_name(p.stem + META_SUFFIX)):
        if cand.exists():
            return cand
    return None


def read_metadata(meta: str | Path) -> Layout:
    """Parse a metadata file of our schema into a :class:`Layout`."""
    try:
        data = tomllib.loads(Path(meta).read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise RecordingError(f"metadata file must be valid TOML, got {str(meta)!r}: {exc}") from None
    rec = data.get("recording")
    if not isinstance(rec, dict):
        raise RecordingError(f"metadata file must have a [recording] table, got none in {str(meta)!r}")
    known = {"schema", "dtype", "channels", "rate_hz", "gain_uv", "offset_uv", "header_bytes"}
    unknown = set(rec) - known
    if unknown:
        raise RecordingError(f"metadata [recording] keys must be among {', '.join(sorted(known))}, "
                             f"got {', '.join(sorted(unknown))}")
    for key in ("channels", "rate_hz"):
        if key not in rec:
            raise RecordingError(f"metadata [recording] must give {key}, got none in {str(meta)!r}")
    groups = data.get("group", [])
    if not isinstance(groups, list) or not all(isinstance(g, dict) and isinstance(g.get("channels"), list) for g in groups):
        raise RecordingError("metadata [[group]] entries must each hold a channels list, got "
                             f"{groups!r}"[:200])
    layout = Layout(channels=rec["channels"], rate_hz=rec["rate_hz"], dtype=rec.get("dtype", "int16"),
                    gain_uv=rec.get("gain_uv", 1.0), offset_uv=rec.get("offset_uv", 0.0),
                    header_bytes=rec.get("header_bytes", 0),
                    groups=[g["channels"] for g in groups] or None,
                    group_names=[str(g.get("name", f"group {i + 1}")) for i, g in enumerate(groups)] or None)
    if isinstance(layout.rate_hz, int):
        layout.rate_hz = float(layout.rate_hz)
    layout.validate()
    return layout


def write_metadata(path: str | Path, layout: Layout) -> Path:
    """Write the metadata file of our schema beside the raw file ``path`` (atomically)."""
    layout.validate()
    rec = {"schema": 1, "dtype": layout.dtype, "channels": layout.channels, "rate_hz": float(layout.rate_hz),
           "gain_uv": float(layout.gain_uv), "offset_uv": float(layout.offset_uv), "header_bytes": layout.header_bytes}
    names = layout.group_names or []
    groups = [{"name": str(names[i]) if i < len(names) else f"group {i + 1}", "channels": [int(c) for c in g]}
              for i, g in enumerate(layout.groups or [])]
    text = "# rigside recording description\n" + tomli_w.dumps({"recording": rec} | ({"group": groups} if groups else {}))
    meta = Path(path).with_name(Path(path).stem + META_SUFFIX)
    return atomic_write(meta, lambda tmp: tmp.write_text(text, encoding="utf-8"))


def open_recording(path: str | Path, *, channels: int | None = None, rate_hz: float | None = None,
                   dtype: str | None = None, gain_uv: float | None = None, offset_uv: float | None = None,
                   group_size: int | None = None, dataset: str | None = None) -> Recording:
    """Open a recording read-only, choosing the reader from the file.

    HDF5 files are recognised by their signature; anything else is raw binary described by
    its metadata file, with any keyword given here overriding the file.
    """
    p = Path(path)
    if not p.exists():
        raise RecordingError(f"recording file must exist, got {str(path)!r}")
    if p.is_dir():
        raise RecordingError(f"recording must be a file, got the directory {str(path)!r}")
    if p.stat().st_size == 0:
        raise RecordingError(f"recording file must not be empty, got 0 bytes in {str(path)!r}")
    if h5py.is_hdf5(p):
        rec = HDF5Recording(p, dataset=dataset, rate_hz=rate_hz, gain_uv=gain_uv)
        if group_size is not None:
            rec._init_groups(groups_of_size(rec.n_channels, group_size), None)
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
                       ("gain_uv", gain_uv), ("offset_uv", offset_uv)):
        if value is not None:
            setattr(layout, key, value)
    if group_size is not None:
        layout.groups = groups_of_size(layout.channels, group_size)
        layout.group_names = None
    return RawRecording(p, layout)
