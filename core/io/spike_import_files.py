"""Readers of the spike-file layouts described in :mod:`rigside.core.io.spike_import`.

Each reader returns ``(times_s, units)`` in file order, plus the listed unit ids for layouts
that list units apart from their spikes (HDF5 ``unit_ids``, NWB); :func:`rigside.core.io.spike_import.checked_trains`
checks them. Sizes declared by a file (NumPy headers, HDF5 shapes) are checked against the
size of the file before anything is allocated, so a small hostile file cannot claim gigabytes.
"""

from __future__ import annotations

import io
import math
import os
import warnings
import zipfile
from pathlib import Path

import h5py
import numpy as np

from rigside.core.errors import SpikeFileError
from rigside.core.io import spike_import as si
from rigside.core.io.spike_import import NamedIds, SpikeTrains, checked_trains, declared_budget, pick_time_column
from rigside.core.io.spike_import_nwb import read_nwb


# ---- CSV ------------------------------------------------------------------------------
def _cells(line: str) -> list[str]:
    return [c.strip().strip('"').strip() for c in line.split(",")]


def _first_bad_line(lines: list[str], cols: dict[str, int], line_offset: int) -> str | None:
    """Describe the first data line whose chosen cells do not parse (1-based line number,
    counting ``line_offset`` lines before ``lines``)."""
    for k in range(len(lines)):
        line = lines[k].strip()
        if not line or line.startswith("#"):
            continue
        cells = _cells(line)
        for name, i in cols.items():
            if i >= len(cells):
                return f"line {line_offset + k + 1} has {len(cells)} cells, no {name} (truncated?)"
            try:
                int(cells[i]) if name in ("unit", "sample") else float(cells[i])
            except ValueError:
                kind = "an integer" if name in ("unit", "sample") else "a number"
                return f"line {line_offset + k + 1} column {name} must be {kind}, got {cells[i][:30]!r}"
    return None


CSV_BLOCK_BYTES = 8 << 20
"""CSV files are decoded and parsed in blocks of about this many bytes (whole lines)."""

_RARE_LINE_BREAKS = "\x0b\x0c\x1c\x1d\x1e\x85\u2028\u2029"
"""Line breaks of ``str.splitlines`` besides \\n, \\r and \\r\\n."""


def _plain_breaks(text: str) -> bool:
    return not any(c in text for c in _RARE_LINE_BREAKS)


def _line_count(text: str) -> int:
    """``len(text.splitlines())`` without building the lines where the breaks are plain."""
    if not _plain_breaks(text):
        return len(text.splitlines())
    return text.count("\n") + text.count("\r") - text.count("\r\n") + (text[-1:] not in ("", "\n", "\r"))


def _text_blocks(path: Path):
    """Yield ``(lines before the block, text of the block)`` of a UTF-8 text file, reading
    about :data:`CSV_BLOCK_BYTES` at a time; each block ends at a newline byte (or the end of
    the file), so its ``splitlines`` are the file's lines. A leading byte-order mark is dropped."""
    done = pos = 0
    pieces: list[bytes] = []
    with open(path, "rb") as fh:
        while True:
            raw = fh.read(CSV_BLOCK_BYTES)
            cut = raw.rfind(b"\n") + 1 if raw else 0
            if raw and cut == 0:            # no line ends in this read: keep it for the next block
                pieces.append(raw)
                continue
            block = b"".join(pieces + [raw[:cut] if raw else b""])
            pieces = [raw[cut:]] if raw else []
            try:
                text = block.decode("utf-8-sig" if pos == 0 else "utf-8")
            except UnicodeDecodeError as exc:
                raise SpikeFileError(f"{path.name} must be UTF-8 text, got undecodable bytes at byte "
                                     f"{pos + exc.start}") from None
            yield done, text
            done += _line_count(text)
            pos += len(block)
            if not raw:
                return


def _csv_header(blocks, name: str) -> tuple[list[str], int, str]:
    """Column names of the header row, the lines before the data, and the data left in its block."""
    for done, text in blocks:
        if _plain_breaks(text):
            sio = io.StringIO(text, newline=None)
            for k, line in enumerate(iter(sio.readline, "")):
                if line.strip() and not line.lstrip().startswith("#"):
                    return [c.lower() for c in _cells(line)], done + k + 1, sio.read()
            continue
        lines = text.splitlines()
        head = next((k for k, line in enumerate(lines) if line.strip() and not line.lstrip().startswith("#")), None)
        if head is not None:
            return [c.lower() for c in _cells(lines[head])], done + head + 1, "\n".join(lines[head + 1:])
    raise SpikeFileError(f"{name} must start with a header row naming its columns (unit and "
                         f"time_s, time_ms or sample), got an empty file")


class _NamedUnits(Exception):
    """A unit cell holds a name, not an integer: the file is read again keeping the names."""


def _names_a_unit(text: str, column: int) -> bool:
    """True when some data line of ``text`` has a unit cell that is text, not a number."""
    for line in text.splitlines():
        line = line.strip()
        if line and not line.startswith("#"):
            cells = _cells(line)
            if column < len(cells) and cells[column] and not si.is_number_text(cells[column]):
                return True
    return False


def _loadtxt(text: str, usecols, dtype) -> np.ndarray:
    lines = io.StringIO(text, newline=None) if _plain_breaks(text) else io.StringIO("\n".join(text.splitlines()))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)     # a block of comments only is empty
        # older numpy (2.0, the floor) only warns and truncates when an integer column holds "1.5"
        warnings.simplefilter("error", DeprecationWarning)
        return np.loadtxt(lines, delimiter=",", usecols=usecols, dtype=dtype, ndmin=1, comments="#", quotechar='"')


def _parse_block(text: str, cols: dict[str, int], tcol: str, named: bool, done: int,
                 name: str) -> tuple[np.ndarray, np.ndarray]:
    """Unit and time columns of one block (empty arrays for a block without data rows); unit
    cells as text when ``named``, else as integers (raising :class:`_NamedUnits` at a name)."""
    tkind = "i8" if tcol == "sample" else "f8"
    try:
        if named:
            return _loadtxt(text, [cols["unit"]], str), _loadtxt(text, [cols[tcol]], tkind)
        dtype = [("unit", "i8"), ("time", tkind)]
        order = sorted(cols.values())
        data = _loadtxt(text, order, dtype if order == list(cols.values()) else dtype[::-1])
        return data["unit"], data["time"]
    except ValueError as exc:
        if not named and _names_a_unit(text, cols["unit"]):
            raise _NamedUnits from None
        where = _first_bad_line(text.splitlines(), cols if not named else {tcol: cols[tcol]}, done) or str(exc)
        raise SpikeFileError(f"{name} must hold a unit and a time in every row, got {where}") from None


def read_csv(path: Path, rate_hz: float | None) -> tuple[np.ndarray, np.ndarray | NamedIds]:
    """CSV with a header row naming ``unit`` and one time column; ``#`` lines are comments.

    Parsed block by block (:data:`CSV_BLOCK_BYTES`), keeping only the two columns as arrays.
    Unit cells are integers, or names (a file holding one name is read again keeping every
    unit cell as its name).
    """
    try:
        return _read_csv(path, rate_hz, named=False)
    except _NamedUnits:
        return _read_csv(path, rate_hz, named=True)


def _read_csv(path: Path, rate_hz: float | None, named: bool) -> tuple[np.ndarray, np.ndarray | NamedIds]:
    blocks = _text_blocks(path)
    names, done, text = _csv_header(blocks, path.name)
    if "unit" not in names:
        raise SpikeFileError(f"{path.name} must have a header row with a unit column, got "
                             f"{', '.join(names)[:120]!r}")
    tcol = pick_time_column(names, path.name)
    cols = {"unit": names.index("unit"), tcol: names.index(tcol)}
    codes: dict[str, int] = {}
    units, times = [], []
    while True:
        unit, time = _parse_block(text, cols, tcol, named, done, path.name)
        if named:
            distinct, inverse = np.unique(np.char.strip(unit), return_inverse=True)
            lut = np.array([codes.setdefault(str(n), len(codes)) for n in distinct], dtype=np.int64)
            unit = lut[inverse] if len(unit) else np.zeros(0, dtype=np.int64)
        units.append(unit)
        times.append(time)
        del unit, time, text
        try:
            done, text = next(blocks)
        except StopIteration:
            break
    if sum(len(u) for u in units) == 0:
        raise SpikeFileError(f"{path.name} must hold at least one spike, got a header only")
    unit = np.concatenate(units)
    del units
    time = np.concatenate(times)
    del times
    return si.to_seconds(tcol, time, rate_hz, path.name), NamedIds(unit, tuple(codes)) if named else unit


# ---- NumPy ----------------------------------------------------------------------------
def _npy_header(fh, what: str) -> tuple[tuple, np.dtype, int]:
    """Shape, dtype and header length of an .npy stream, refusing object arrays."""
    try:
        version = np.lib.format.read_magic(fh)
        if version == (1, 0):
            shape, _, dtype = np.lib.format.read_array_header_1_0(fh)
        elif version == (2, 0):
            shape, _, dtype = np.lib.format.read_array_header_2_0(fh)
        else:
            raise ValueError(f"unsupported .npy version {version}")
    except (ValueError, OSError, EOFError) as exc:
        raise SpikeFileError(f"{what} must be a NumPy array file, got an unreadable header ({exc})") from None
    if dtype.hasobject:
        raise SpikeFileError(f"{what} must hold plain numbers, got an object array (refused: it could run code)")
    return shape, dtype, fh.tell()


def _declared(shape: tuple, dtype: np.dtype) -> int:
    return int(math.prod(shape)) * dtype.itemsize


def read_npy(path: Path, rate_hz: float | None) -> tuple[np.ndarray, np.ndarray]:
    """A structured .npy array with fields ``unit`` and one time field."""
    with open(path, "rb") as fh:
        shape, dtype, offset = _npy_header(fh, path.name)
    size = os.path.getsize(path)
    if _declared(shape, dtype) != size - offset:
        raise SpikeFileError(f"{path.name} must hold the {_declared(shape, dtype)} data bytes its header "
                             f"declares, got {size - offset} (truncated or padded)")
    if dtype.names is None:
        raise SpikeFileError(f"{path.name} must be a structured array with fields unit and time_s, time_ms "
                             f"or sample (or use .npz), got a plain {dtype} array of shape {shape}")
    try:
        data = np.load(path, allow_pickle=False)
    except (ValueError, OSError, EOFError) as exc:
        raise SpikeFileError(f"{path.name} must be a readable NumPy file, got {exc}") from None
    return _columns({n: data[n] for n in dtype.names}, dict(shape=shape), rate_hz, path.name)


def read_npz(path: Path, rate_hz: float | None) -> tuple[np.ndarray, np.ndarray]:
    """An .npz archive of 1-D arrays ``unit`` and one time array (and optional ``rate_hz``)."""
    budget = declared_budget(path)
    try:
        with zipfile.ZipFile(path) as zf:
            names = {n[:-4]: n for n in zf.namelist() if n.endswith(".npy")}
            total = 0
            for key, member in names.items():
                with zf.open(member) as fh:
                    shape, dtype, _ = _npy_header(fh, f"{path.name}:{key}")
                total += _declared(shape, dtype)
            if total > budget:
                raise SpikeFileError(f"{path.name} must declare arrays that fit its size "
                                     f"({os.path.getsize(path)} bytes), got {total} bytes declared")
    except (zipfile.BadZipFile, OSError, EOFError) as exc:
        raise SpikeFileError(f"{path.name} must be a readable .npz archive, got {exc}") from None
    try:
        with np.load(path, allow_pickle=False) as z:
            tcol = pick_time_column(list(names), path.name)
            wanted = ["unit", tcol] + (["rate_hz"] if "rate_hz" in names else [])
            if "unit" not in names:
                raise SpikeFileError(f"{path.name} must hold an array named unit, got {', '.join(names)}")
            data = {k: z[k] for k in wanted}
    except (ValueError, OSError, EOFError, zipfile.BadZipFile) as exc:
        raise SpikeFileError(f"{path.name} must be a readable .npz archive, got {exc}") from None
    return _columns(data, {}, rate_hz, path.name)


def _stored_rate(value, source: str) -> float:
    a = np.asarray(value)
    if a.size != 1 or a.dtype.kind not in "iuf" or not math.isfinite(float(a.reshape(-1)[0])) \
            or float(a.reshape(-1)[0]) <= 0:
        raise SpikeFileError(f"rate_hz of {source} must be one positive number of Hz, got {a!r}")
    return float(a.reshape(-1)[0])


def _columns(data: dict, info: dict, rate_hz: float | None, source: str) -> tuple[np.ndarray, np.ndarray]:
    if "unit" not in data:
        raise SpikeFileError(f"{source} must hold a column named unit, got {', '.join(data)}")
    tcol = pick_time_column(list(data), source)
    if "rate_hz" in data:
        rate_hz = _stored_rate(data["rate_hz"], source)
    for key in ("unit", tcol):
        if np.asarray(data[key]).ndim != 1:
            raise SpikeFileError(f"{key} of {source} must be a 1-D array, got shape {np.shape(data[key])}")
    return si.to_seconds(tcol, data[tcol], rate_hz, source), np.asarray(data["unit"])


# ---- HDF5 (our layout) ----------------------------------------------------------------
def _h5_dataset(g: h5py.Group, name: str, source: str) -> h5py.Dataset:
    link = g.get(name, getlink=True)
    if not isinstance(link, h5py.HardLink):
        raise SpikeFileError(f"{source}: {name} must be stored in the file itself, got a {type(link).__name__}")
    ds = g[name]
    if not isinstance(ds, h5py.Dataset):
        raise SpikeFileError(f"{source}: {name} must be a dataset, got a {type(ds).__name__}")
    if ds.dtype.kind not in "iuf" or ds.dtype.names is not None or ds.ndim != 1:
        raise SpikeFileError(f"{source}: {name} must be a 1-D numeric dataset, got {ds.dtype} with shape {ds.shape}")
    if ds.is_virtual or ds.external:
        raise SpikeFileError(f"{source}: {name} must keep its data inside the file, got data stored elsewhere")
    return ds


def read_h5(path: Path, rate_hz: float | None, group: str | None = None) -> tuple[np.ndarray, ...]:
    """HDF5 group of 1-D datasets ``unit`` and one time column; ``unit_ids`` optional."""
    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise SpikeFileError(f"{path.name} must be a readable HDF5 file, got {exc} (truncated, corrupted "
                             f"or another type)") from None
    source = f"{path.name}:{group or '/'}"
    with f:
        try:
            if group not in (None, "/", ""):
                link = f.get(group, getlink=True)
                if link is None or not isinstance(link, h5py.HardLink) or not isinstance(f[group], h5py.Group):
                    raise SpikeFileError(f"HDF5 group of {path.name} must exist in the file, got {group!r}")
            g = f[group or "/"]
            names = [n for n in g if n in si.TIME_COLUMNS or n in ("unit", "unit_ids")]
            if "unit" not in names:
                raise SpikeFileError(f"{source} must hold a dataset named unit, got {', '.join(sorted(g))[:120]}")
            tcol = pick_time_column(names, source)
            sets = {n: _h5_dataset(g, n, source) for n in names}
            declared = sum(ds.size * ds.dtype.itemsize for ds in sets.values())
            if declared > declared_budget(path):
                raise SpikeFileError(f"{source} must declare datasets that fit the file "
                                     f"({os.path.getsize(path)} bytes), got {declared} bytes declared")
            if "rate_hz" in g.attrs:
                rate_hz = _stored_rate(g.attrs["rate_hz"], source)
            data = {n: ds[()] for n, ds in sets.items()}
        except (OSError, KeyError, TypeError) as exc:
            raise SpikeFileError(f"{source} must be readable, got {type(exc).__name__}: {exc}") from None
    units = np.asarray(data["unit"])
    if "unit_ids" in data:
        known = np.asarray(data["unit_ids"])
        unknown = np.setdiff1d(units, known)
        if len(unknown):
            raise SpikeFileError(f"units of {source} must be listed in unit_ids, got unknown units "
                                 f"{unknown[:10].tolist()}")
        return si.to_seconds(tcol, data[tcol], rate_hz, source), units, known
    return si.to_seconds(tcol, data[tcol], rate_hz, source), units


def load_spikes(path: str | Path, rate_hz: float | None = None, group: str | None = None,
                time_offset_s: float = 0.0) -> SpikeTrains:
    """Import spike trains from a file, choosing the reader by suffix.

    Parameters
    ----------
    path
        ``.csv``/``.txt``, ``.npy``, ``.npz``, ``.h5``/``.hdf5`` or ``.nwb`` (see the module
        docstring for the layouts).
    rate_hz
        Sampling rate of ``sample`` columns (a rate stored in the file wins if given there).
    group
        HDF5 group holding the columns (default: the root).
    time_offset_s
        Subtracted from every time, for files whose clock started before the recording.

    Returns
    -------
    SpikeTrains
        The checked spikes; call :meth:`SpikeTrains.check_within` with the recording length.
    """
    path = Path(path)
    if not path.is_file():
        raise SpikeFileError(f"spike file must be an existing file, got {str(path)!r}")
    suffix = path.suffix.lower()
    readers = {".csv": read_csv, ".txt": read_csv, ".npy": read_npy,
               ".npz": read_npz, ".h5": read_h5, ".hdf5": read_h5,
               ".nwb": read_nwb}
    if suffix not in readers:
        raise SpikeFileError(f"spike file must end in {', '.join(readers)}, got {path.name!r}")
    if group is not None and suffix not in (".h5", ".hdf5"):
        raise SpikeFileError(f"an HDF5 group can only be chosen for .h5 or .hdf5 files, got {path.name!r}")
    if not (isinstance(time_offset_s, (int, float)) and math.isfinite(time_offset_s)):
        raise SpikeFileError(f"time offset must be a finite number of seconds, got {time_offset_s!r}")
    kwargs = {"group": group} if suffix in (".h5", ".hdf5") else {}
    times, units, *listed = readers[suffix](path, rate_hz, **kwargs)
    return checked_trains(np.asarray(times, dtype=np.float64) - float(time_offset_s), units, path.name,
                  listed[0] if listed else None)
