"""Importing spike trains sorted elsewhere (or earlier): CSV, NumPy, HDF5 and NWB units.

Every layout names its columns the same way: ``unit`` (unit id: an integer, or in CSV and NWB
files a name such as ``tt3_u2``) and exactly one time column, ``time_s`` (seconds), ``time_ms``
(milliseconds) or ``sample`` (integer sample index, converted with a sampling rate). Accepted files (see docs/audit.md):

- CSV (``.csv``, ``.txt``): a header row naming the columns, then one row per spike; lines
  starting with ``#`` are comments; other columns are ignored.
- NumPy ``.npz``: one 1-D array per column (``unit`` and a time column; optional 0-d
  ``rate_hz`` for samples). NumPy ``.npy``: a structured array with those fields.
  Loaded with ``allow_pickle=False``; declared sizes are checked against the file size first.
- HDF5 (``.h5``, ``.hdf5``): a group (the root by default) holding 1-D datasets named after
  the columns; an optional ``unit_ids`` dataset lists the units, and every spike's unit must
  be among them; the group attribute ``rate_hz`` gives the rate for samples.
- NWB (``.nwb``): the units table (``spike_times`` in seconds), read with pynwb; a text column
  ``unit_name`` names the units (else their integer ids are used).

Unit names (text ids) are kept as given (surrounding spaces dropped) and ordered naturally
(``tt3_u2`` before ``tt3_u10``); inside, each unit is an integer code in that order, and
:meth:`SpikeTrains.unit_name` gives the name back. A name must not be empty nor a number that is
not an integer (``1.5`` is refused as a mistaken id, not taken as a name).

Rules checked for every file: at least one spike, finite non-negative times sorted within
each unit, integer or named unit ids, one unit of time; :meth:`SpikeTrains.check_within` adds the
recording's length. Bad files raise :class:`~rigside.core.errors.SpikeFileError`.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass

import numpy as np

from rigside.core.errors import SpikeFileError

MAX_EXPANSION = 64
"""Declared array bytes may exceed the file size by at most this factor (plus 64 MiB)."""


def declared_budget(path) -> int:
    """Most bytes the arrays of the spike file ``path`` may declare (see :data:`MAX_EXPANSION`)."""
    return MAX_EXPANSION * os.path.getsize(path) + (64 << 20)


TIME_COLUMNS = {"time_s": 1.0, "time_ms": 1e-3, "sample": None}
"""Accepted time columns and their factor to seconds (samples need a rate)."""


@dataclass(frozen=True)
class SpikeTrains:
    """Imported spikes, sorted by unit then time.

    Attributes
    ----------
    times_s
        Spike times in seconds (float64), grouped by unit, ascending inside each unit.
    units
        Unit id of each spike (int64), ascending; for named units the code of the name.
    source
        File the spikes came from (for reports).
    empty_units
        Ids (or names) the file lists (HDF5 ``unit_ids``, NWB units table) that hold no spike;
        they cannot be audited and are left out, and :meth:`empty_note` says so.
    names
        The unit names by code, in natural order, when the file names its units (else empty).
    """

    times_s: np.ndarray
    units: np.ndarray
    source: str = ""
    empty_units: tuple = ()
    names: tuple[str, ...] = ()

    def unit_name(self, unit: int) -> str:
        """The unit as the file gives it: its name, or its integer id as text."""
        return self.names[int(unit)] if self.names else str(int(unit))

    def shown_ids(self, units) -> np.ndarray:
        """The file's ids of ``units`` (codes): int64 ids, or the names as an object array."""
        if not self.names:
            return np.asarray(units, dtype=np.int64)
        return np.array([self.names[int(u)] for u in units], dtype=object)

    @property
    def unit_ids(self) -> np.ndarray:
        """Distinct unit ids, ascending."""
        return np.unique(self.units)

    def __len__(self) -> int:
        return len(self.times_s)

    def bounds(self) -> tuple[np.ndarray, np.ndarray]:
        """Unit ids and the index where each unit's spikes start (plus the end)."""
        ids = self.unit_ids        # ``id + 1`` would overflow at the largest int64 id: search right of the last
        return ids, np.append(np.searchsorted(self.units, ids), len(self.units)) if len(ids) else ids

    def span(self, unit: int) -> tuple[int, int]:
        """Index range ``[lo, hi)`` of one unit's spikes (empty when the unit has none)."""
        u = np.int64(unit)
        return int(np.searchsorted(self.units, u, "left")), int(np.searchsorted(self.units, u, "right"))

    def train(self, unit: int) -> np.ndarray:
        """Sorted spike times (s) of one unit."""
        lo, hi = self.span(unit)
        if lo == hi:
            raise SpikeFileError(f"unit must be one of the imported units, got {unit!r}")
        return self.times_s[lo:hi]

    def empty_note(self) -> str:
        """A sentence naming the units the file listed without spikes ("" when none)."""
        if not self.empty_units:
            return ""
        shown = ", ".join(map(str, self.empty_units[:10])) + (", ..." if len(self.empty_units) > 10 else "")
        return f"{len(self.empty_units)} listed units without spikes left out: {shown}"

    def check_within(self, duration_s: float, rate_hz: float | None = None) -> None:
        """Raise :class:`SpikeFileError` if a spike lies past the end of the recording.

        ``rate_hz`` (the recording's rate) lets the message say when the times look like
        samples rather than seconds.
        """
        if len(self) == 0 or self.times_s.max() <= duration_s:
            return
        late = self.times_s > duration_s
        unit = self.unit_name(self.units[np.argmax(late)])
        last = float(self.times_s.max())
        hint = ""
        scales = [("milliseconds", 1e-3)] + ([("samples", 1.0 / rate_hz)] if rate_hz else [])
        for name, factor in scales:
            if 0.5 * duration_s < last * factor <= duration_s:
                hint = f"; they look like {name} (name the time column time_ms or sample)"
                break
        raise SpikeFileError(f"spike times of {self.source or 'the imported file'} must lie within the "
                             f"recording (0 to {duration_s:.6g} s), got {int(late.sum())} spikes up to "
                             f"{last:.6g} s (first in unit {unit}){hint}")


@dataclass(frozen=True)
class NamedIds:
    """Named unit ids as a reader collects them: ``codes`` index ``names`` (in any order)."""

    codes: np.ndarray
    names: tuple[str, ...]


def natural_key(name: str) -> tuple:
    """Sort key putting names in natural order: runs of digits compare as numbers
    (``tt3_u2`` < ``tt3_u10`` < ``tt10_u1``), letters without regard to case."""
    parts = [p for p in re.split(r"([0-9]+)", name) if p]
    return tuple((0, int(p), "") if p[0] in "0123456789" else (1, 0, p.casefold()) for p in parts), name


def is_number_text(text: str) -> bool:
    """True when ``text`` reads as a number (an id of that kind is not a name)."""
    try:
        float(text)
    except ValueError:
        return False
    return True


def named_ids(x, what: str) -> NamedIds:
    """Text ids (an array of strings, or :class:`NamedIds`) checked, as codes of distinct names."""
    if isinstance(x, NamedIds):
        codes, raw = np.asarray(x.codes, dtype=np.int64), [str(n) for n in x.names]
    else:
        a = np.asarray(x)
        if a.ndim != 1:
            raise SpikeFileError(f"{what} must be a 1-D list, got shape {a.shape}")
        distinct, codes = np.unique(a.astype(str), return_inverse=True)
        raw = [str(n) for n in distinct]
    names = [n.strip() for n in raw]
    for n in names:
        if n == "":
            raise SpikeFileError(f"{what} must be integers or names, got an empty id")
        if is_number_text(n) and not re.fullmatch(r"[+-]?[0-9]+", n):
            raise SpikeFileError(f"{what} must be integers or names, got {n[:30]!r} (a number that is not an integer)")
    if len(set(names)) != len(names):
        dup = next(n for n in names if names.count(n) > 1)
        raise SpikeFileError(f"{what} must name each unit once, got {dup[:30]!r} for several units")
    order = sorted(range(len(names)), key=lambda i: natural_key(names[i]))
    rank = np.empty(len(names), dtype=np.int64)
    rank[order] = np.arange(len(names))
    return NamedIds(rank[codes] if len(codes) else codes.astype(np.int64), tuple(names[i] for i in order))


def _is_text(x) -> bool:
    return isinstance(x, NamedIds) or np.asarray(x).dtype.kind in "US" or (
        np.asarray(x).dtype.kind == "O" and all(isinstance(v, (str, bytes)) for v in np.asarray(x).reshape(-1)))


def checked_trains(times_s, units, source: str, listed=None) -> SpikeTrains:
    """Check raw columns and build :class:`SpikeTrains` (sorted by unit, stable in time).

    Parameters
    ----------
    times_s
        Spike times in seconds, in file order.
    units
        Unit ids in file order: integers (or floats holding whole numbers), or names (strings,
        or :class:`NamedIds`), kept as given and ordered naturally.
    source
        Name of the file, used in messages.
    listed
        Every unit id (or name) the file lists, when it lists them apart from the spikes (``None``: no list).
    """
    name = source or "spike file"
    t = _numeric_1d(times_s, f"spike times of {name}")
    names: tuple[str, ...] = ()
    if _is_text(units):
        ids = named_ids(units, f"unit ids of {name}")
        u, names = ids.codes, ids.names
    else:
        u = _integer_ids(units, f"unit ids of {name}")
    shown = (lambda k: names[int(k)]) if names else (lambda k: int(k))
    if len(t) != len(u):
        raise SpikeFileError(f"{name} must give one unit per spike time, got {len(t)} times and {len(u)} units")
    if len(t) == 0:
        raise SpikeFileError(f"{name} must hold at least one spike, got none")
    if not np.all(np.isfinite(t)):
        raise SpikeFileError(f"spike times of {name} must be finite numbers, got "
                             f"{int(np.count_nonzero(~np.isfinite(t)))} NaN or infinite values")
    if t.min() < 0:
        i = int(np.argmin(t))
        raise SpikeFileError(f"spike times of {name} must be at least 0 s, got {t[i]:.6g} s "
                             f"(spike {i}, unit {shown(u[i])})")
    order = np.argsort(u, kind="stable")
    t, u = t[order], u[order]
    backwards = (np.diff(t) < 0) & (np.diff(u) == 0)
    if backwards.any():
        i = int(np.argmax(backwards))
        raise SpikeFileError(f"spike times of each unit in {name} must be sorted in time, got "
                             f"{t[i]:.6g} s before {t[i + 1]:.6g} s in unit {shown(u[i])}")
    return SpikeTrains(np.ascontiguousarray(t), np.ascontiguousarray(u), source,
                       _empty(listed, u, names, name), names)


def _empty(listed, u: np.ndarray, names: tuple[str, ...], name: str) -> tuple:
    """The listed ids (or names) holding no spike."""
    if listed is None:
        return ()
    if names:
        held = {names[int(k)] for k in np.unique(u)}
        return tuple(n for n in named_ids(listed, f"unit list of {name}").names if n not in held)
    return tuple(int(x) for x in np.setdiff1d(_integer_ids(listed, f"unit list of {name}"), u))


def _numeric_1d(x, what: str) -> np.ndarray:
    a = np.asarray(x)
    if a.dtype.kind not in "iuf" or a.dtype.names is not None:
        raise SpikeFileError(f"{what} must be numbers, got values of type {a.dtype}")
    if a.ndim != 1:
        raise SpikeFileError(f"{what} must be a 1-D list, got shape {a.shape}")
    return a.astype(np.float64)


def _integer_ids(x, what: str) -> np.ndarray:
    a = np.asarray(x)
    if a.ndim != 1:
        raise SpikeFileError(f"{what} must be a 1-D list, got shape {a.shape}")
    if a.dtype.kind in "iu":
        if a.dtype.kind == "u" and len(a) and a.max() > np.iinfo(np.int64).max:
            raise SpikeFileError(f"{what} must fit 64-bit integers, got {a.max()}")
        return a.astype(np.int64)
    if a.dtype.kind == "f":
        whole = np.isfinite(a) & (a == np.round(a)) & (np.abs(a) < 2**53)
        if not whole.all():
            raise SpikeFileError(f"{what} must be whole numbers, got {a[~whole][0]!r}")
        return a.astype(np.int64)
    raise SpikeFileError(f"{what} must be integers, got values of type {a.dtype}")


def to_seconds(column: str, values, rate_hz: float | None, source: str) -> np.ndarray:
    """Convert a time column to seconds; samples must be non-negative integers and need a rate."""
    if column not in TIME_COLUMNS:
        raise SpikeFileError(f"time column of {source} must be one of {', '.join(TIME_COLUMNS)}, got {column!r}")
    factor = TIME_COLUMNS[column]
    if factor is not None:
        return _numeric_1d(values, f"{column} of {source}") * factor
    if rate_hz is None or not (isinstance(rate_hz, (int, float)) and math.isfinite(rate_hz) and rate_hz > 0):
        raise SpikeFileError(f"sampling rate of the spike samples in {source} must be a positive number of "
                             f"Hz, got {rate_hz!r}")
    s = np.asarray(values)
    if s.dtype.kind == "f":
        s = _integer_ids(s, f"samples of {source}")
    elif s.dtype.kind not in "iu":
        raise SpikeFileError(f"samples of {source} must be integers, got values of type {s.dtype}")
    return _numeric_1d(s, f"samples of {source}") / float(rate_hz)


def pick_time_column(names, source: str) -> str:
    """The single time column among ``names`` (refusing none, an unnamed unit, or several)."""
    found = [n for n in names if n in TIME_COLUMNS]
    if len(found) > 1:
        raise SpikeFileError(f"{source} must give spike times in one unit of time, got columns "
                             f"{', '.join(found)} (mixed units of time)")
    if not found:
        vague = [n for n in names if n.startswith("time") or n in ("t", "timestamp", "timestamps", "spike_times")]
        got = f"{', '.join(vague)} (no unit of time named)" if vague else ", ".join(names) or "none"
        raise SpikeFileError(f"{source} must hold a time column named time_s, time_ms or sample, got {got}")
    return found[0]
