"""The event table: one row per detected event, sorted by time.

Each event stores its peak in microvolts (signed) and in multiples of its channel's
noise sigma, so counts and masks for any threshold at or above the table's floor come
from a look-up, without re-reading the recording. Events of a recording with site positions
(a probe) also hold an estimated position, ``x_um`` and ``y_um`` (:data:`POSITION_COLUMNS`);
tables without positions have neither column, in memory or in files. Tables of a sort whose
second pass ran hold ``recovered`` (:data:`RECOVERED`): True for an event found in the residual
after template subtraction (:mod:`rigside.core.signal.overlaps`), not by detection; files
written before it (and tables without the pass) have no such column, and every event is detected.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import h5py
import numpy as np

from rigside.core.errors import RigsideError
from rigside.core.io.atomic import atomic_write
from rigside.core.io.csv_text import write_rows
from rigside.core.io.h5image import write_h5
from rigside.core.params import POLARITIES

COLUMNS = {
    "sample": np.int64,
    "channel": np.int32,
    "group": np.int32,
    "amplitude_uv": np.float32,
    "amplitude_sigma": np.float32,
    "artefact": np.bool_,
}
"""Stored columns of an event table and their dtypes, in file order: the one list every reader,
writer and builder of event tables follows."""
CSV_COLUMNS = ("sample", "time_s", *(c for c in COLUMNS if c != "sample"))
"""Columns of the event CSV: the stored ones with ``time_s`` after ``sample``."""
POSITION_COLUMNS = ("x_um", "y_um")
"""Optional float32 columns of events on a probe (after the others, in memory and in files)."""
RECOVERED = "recovered"
"""Optional bool column: the event was recovered by the overlap pass (after :data:`COLUMNS`, before positions)."""
OPTIONAL_COLUMNS = {RECOVERED: np.bool_, "x_um": np.float32, "y_um": np.float32}
"""Optional columns and their dtypes, in file order (each stored only when the table has it)."""
MAX_SAMPLES = 2**48
"""Longest recording an event table may describe (about 300 years at 30 kHz)."""


def uv_to_sigma(threshold_uv, sigma_uv) -> np.ndarray:
    """Threshold in sigma multiples from microvolts, per channel.

    Parameters
    ----------
    threshold_uv
        Scalar or one value per channel (uV).
    sigma_uv
        Noise level of each channel (uV); a channel with zero sigma is dead.

    Returns
    -------
    numpy.ndarray
        ``threshold_uv / sigma_uv`` (float64), infinite on dead channels.
    """
    sigma = np.asarray(sigma_uv, dtype=np.float64)
    uv = np.broadcast_to(np.asarray(threshold_uv, dtype=np.float64), sigma.shape)
    return np.where(sigma > 0, uv / np.where(sigma > 0, sigma, 1.0), np.inf)



def _plain(g: h5py.Group, name: str, arr: np.ndarray) -> h5py.Dataset:
    return g.create_dataset(name, data=arr)


def _compressed(g: h5py.Group, name: str, arr: np.ndarray) -> h5py.Dataset:
    if not len(arr):
        return _plain(g, name, arr)
    return g.create_dataset(name, data=arr, compression="gzip", compression_opts=1, shuffle=True)

@dataclass
class EventColumns:
    """The stored columns of events (:data:`COLUMNS`), one entry per event: what detection finds in
    a block, and the first fields of :class:`EventTable`.

    ``amplitude_uv`` is the signed peak of the filtered trace, ``amplitude_sigma`` its magnitude
    divided by the channel's noise sigma.
    """

    sample: np.ndarray
    channel: np.ndarray
    group: np.ndarray
    amplitude_uv: np.ndarray
    amplitude_sigma: np.ndarray
    artefact: np.ndarray


def _channel_amplitude_keys(channel: np.ndarray, amplitude_sigma: np.ndarray) -> np.ndarray:
    """One int64 per (channel, float32 amplitude) sorting as the pairs do: the channel in the high
    32 bits, below it the amplitude's bits made order-preserving (negative floats' magnitude bits
    flipped, the sign offset away); infinite thresholds sort above every finite amplitude."""
    bits = np.asarray(amplitude_sigma, dtype=np.float32).view(np.int32).astype(np.int64)
    ordered = np.where(bits < 0, bits ^ 0x7FFFFFFF, bits) + (1 << 31)
    return (np.asarray(channel, dtype=np.int64) << 32) | ordered


@dataclass
class EventTable(EventColumns):
    """Detected events and the context needed to interpret them.

    Attributes
    ----------
    sample, channel, group, amplitude_uv, amplitude_sigma, artefact
        One entry per event (see :class:`EventColumns`).
    rate_hz, n_samples
        Sampling rate and length of the recording.
    sigma_uv
        Robust noise sigma per channel (microvolts).
    floor_sigma
        Events were kept down to this many sigma; look-ups below it are not exact.
    polarity
        "negative", "positive" or "both".
    excluded
        Channel -> flag ("dead", "saturated") for channels left out of detection.
    x_um, y_um
        Estimated position of each event (micrometres) on a probe, or None (no positions).
    recovered
        True for events recovered by the overlap pass, or None (every event detected). Look-up
        counts (:meth:`counts`, :meth:`count_curve`) hold detected events only; :meth:`mask` selects by
        amplitude, recovered events included.
    """

    rate_hz: float
    n_samples: int
    sigma_uv: np.ndarray
    floor_sigma: float
    polarity: str = "negative"
    excluded: dict[int, str] = field(default_factory=dict)
    x_um: np.ndarray | None = None
    y_um: np.ndarray | None = None
    recovered: np.ndarray | None = None
    _keys: tuple | None = field(default=None, repr=False, compare=False)
    _by_sample: tuple | None = field(default=None, repr=False, compare=False)

    def __post_init__(self) -> None:
        for name, dtype in COLUMNS.items():
            setattr(self, name, np.ascontiguousarray(getattr(self, name), dtype=dtype))
        self.sigma_uv = np.asarray(self.sigma_uv, dtype=np.float64)
        self.excluded = {int(c): str(r) for c, r in self.excluded.items()}
        if (self.x_um is None) != (self.y_um is None):
            raise RigsideError("event positions must give both x_um and y_um or neither, got one")
        for c in self.columns[len(COLUMNS):]:
            setattr(self, c, np.ascontiguousarray(getattr(self, c), dtype=OPTIONAL_COLUMNS[c]))
        n = len(self.sample)
        if any(len(getattr(self, c)) != n for c in self.columns):
            raise RigsideError("event columns must all have the same length, got "
                               + ", ".join(f"{c}={len(getattr(self, c))}" for c in self.columns))

    def __len__(self) -> int:
        return len(self.sample)

    @property
    def columns(self) -> tuple[str, ...]:
        """The stored columns of this table: :data:`COLUMNS`, then those of :data:`OPTIONAL_COLUMNS` it has."""
        return (*COLUMNS, *(c for c in OPTIONAL_COLUMNS if getattr(self, c) is not None))

    @property
    def detected(self) -> np.ndarray:
        """Mask of the events found by detection (all but the recovered ones)."""
        return np.ones(len(self), dtype=bool) if self.recovered is None else ~self.recovered

    @property
    def n_channels(self) -> int:
        return len(self.sigma_uv)

    @property
    def time_s(self) -> np.ndarray:
        """Event times in seconds."""
        return self.sample / self.rate_hz

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.rate_hz

    def thresholds_sigma(self, threshold_sigma=None, threshold_uv=None) -> np.ndarray:
        """Per-channel threshold in sigma units, from a sigma multiple or microvolts.

        Either argument may be a scalar or one value per channel. Channels whose
        sigma is zero (dead) get an infinite threshold.
        """
        if (threshold_sigma is None) == (threshold_uv is None):
            raise RigsideError("threshold must be given either in sigma or in microvolts, got "
                               f"sigma={threshold_sigma!r}, uV={threshold_uv!r}")
        if threshold_sigma is not None:
            return np.broadcast_to(np.asarray(threshold_sigma, dtype=np.float64),
                                   (self.n_channels,)).copy()
        return uv_to_sigma(threshold_uv, self.sigma_uv)

    def mask(self, threshold_sigma=None, threshold_uv=None, include_artefacts: bool = False) -> np.ndarray:
        """Boolean mask of events at or above the threshold (per channel if an array)."""
        thr = self.thresholds_sigma(threshold_sigma, threshold_uv).astype(np.float32)
        keep = self.amplitude_sigma >= thr[self.channel]
        if not include_artefacts:
            keep &= ~self.artefact
        return keep

    def rows_on(self, channels: np.ndarray, start: int, stop: int) -> np.ndarray:
        """Rows of events on ``channels`` with sample in ``[start, stop)``, by channel, each in time order."""
        found = self._by_sample
        if found is None:
            order = np.argsort(self.channel, kind="stable")
            found = self._by_sample = (order, np.searchsorted(self.channel[order], np.arange(self.n_channels + 1)),
                                       self.sample[order])
        order, edges, samples = found
        parts = [order[edges[c]:edges[c + 1]][slice(*np.searchsorted(samples[edges[c]:edges[c + 1]], [start, stop]))]
                 for c in channels]
        return np.concatenate(parts) if parts else np.empty(0, dtype=np.int64)

    def _channel_keys(self) -> tuple[np.ndarray, np.ndarray]:
        """Sorted keys of the non-artefact events and each channel's first index (built once, thread-safe)."""
        found = self._keys
        if found is None:
            ok = ~self.artefact & self.detected
            keys = np.sort(_channel_amplitude_keys(self.channel[ok], self.amplitude_sigma[ok]))
            edges = np.searchsorted(keys, np.arange(self.n_channels + 1, dtype=np.int64) << 32)
            found = self._keys = (keys, edges)
        return found

    def counts(self, threshold_sigma=None, threshold_uv=None) -> np.ndarray:
        """Non-artefact event count per channel at the threshold (one sorted look-up for all channels)."""
        thr = self.thresholds_sigma(threshold_sigma, threshold_uv).astype(np.float32)
        keys, edges = self._channel_keys()
        at = np.searchsorted(keys, _channel_amplitude_keys(np.arange(self.n_channels), thr), side="left")
        return (edges[1:] - at).astype(np.int64)

    def count_curve(self, channel: int, thresholds_sigma: np.ndarray) -> np.ndarray:
        """Non-artefact event counts on one channel for many thresholds (sigma)."""
        keys, edges = self._channel_keys()
        mine = keys[edges[channel]:edges[channel + 1]]
        t = np.asarray(thresholds_sigma, dtype=np.float32)
        return len(mine) - np.searchsorted(mine, _channel_amplitude_keys(np.full(t.shape, channel), t), side="left")

    def subset(self, keep: np.ndarray) -> "EventTable":
        """A new table holding the rows selected by a mask or index array."""
        cols = {c: getattr(self, c)[keep] for c in self.columns}
        return EventTable(**cols, rate_hz=self.rate_hz, n_samples=self.n_samples,
                          sigma_uv=self.sigma_uv.copy(), floor_sigma=self.floor_sigma,
                          polarity=self.polarity, excluded=dict(self.excluded))

    # ---- files -------------------------------------------------------------------------
    def write_csv(self, path: str | Path) -> None:
        """Write ``sample,time_s,channel,group,amplitude_uv,amplitude_sigma,artefact`` (then
        ``recovered`` when the table has it, and ``x_um,y_um`` on a probe) atomically.

        Rows end in CRLF; times have 6 decimals, amplitudes 3 (uV) and 4 (sigma), positions 2;
        formatted in blocks (:func:`rigside.core.io.csv_text.write_rows`).
        """
        names = CSV_COLUMNS + self.columns[len(COLUMNS):]

        def write(tmp: Path) -> None:
            with open(tmp, "wb") as fh:
                fh.write((",".join(names) + "\r\n").encode("ascii"))
                write_rows(fh, [_csv_format(self, c) for c in names], "\r\n")
        atomic_write(path, write)

    def write_h5(self, path: str | Path, group: str = "events") -> None:
        """Write the table into an HDF5 group (own layout: one dataset per column of the CSV,
        ``time_s`` included, plus ``sigma_uv``)."""
        def fill(f) -> None:
            g = f.create_group(group)
            self.to_h5_group(g)
            g.create_dataset("time_s", data=self.time_s)
        atomic_write(path, lambda tmp: write_h5(tmp, fill))

    def to_h5_group(self, g: h5py.Group, store: Callable[[h5py.Group, str, np.ndarray], object] | None = None
                    ) -> dict[str, np.ndarray]:
        """Store columns and context in an open HDF5 group; returns the stored arrays by dataset name.

        Each array is stored by ``store(g, name, array)`` (e.g. uncompressed, straight to the
        file, see :func:`rigside.core.io.h5image.h5_direct`); by default columns are
        gzip-compressed datasets."""
        for c in self.columns:
            (store or _compressed)(g, c, getattr(self, c))
        (store or _plain)(g, "sigma_uv", self.sigma_uv)
        g.attrs.update(rate_hz=self.rate_hz, n_samples=self.n_samples,
                       floor_sigma=self.floor_sigma, polarity=self.polarity,
                       excluded_channels=json.dumps({str(c): r for c, r in self.excluded.items()}))
        return {c: getattr(self, c) for c in (*self.columns, "sigma_uv")}

    @classmethod
    def from_h5_group(cls, g: h5py.Group, data: dict[str, np.ndarray] | None = None) -> "EventTable":
        """Read a table stored by :meth:`to_h5_group`, checking every column and attribute
        (``data``: its datasets by name, already read, so they are not read again)."""
        missing = [c for c in (*COLUMNS, "sigma_uv") if c not in g]
        if missing:
            raise RigsideError(f"event group must hold datasets {', '.join(COLUMNS)}, sigma_uv; "
                               f"missing {', '.join(missing)}")
        def read(name: str) -> np.ndarray:
            return np.asarray(data[name] if data is not None else g[name][()])
        optional = [c for c in OPTIONAL_COLUMNS if c in g and (c not in POSITION_COLUMNS
                                                                 or all(p in g for p in POSITION_COLUMNS))]
        cols = {c: read(c) for c in (*COLUMNS, *optional)}
        for c, dt in (*COLUMNS.items(), *((c, OPTIONAL_COLUMNS[c]) for c in optional)):
            if cols[c].ndim != 1 or not np.can_cast(cols[c].dtype, dt, casting="same_kind"):
                raise RigsideError(f"event column {c} must be a 1-D array of {np.dtype(dt)}, "
                                   f"got {cols[c].dtype} with shape {cols[c].shape}")
        t = cls(**cols, rate_hz=float(g.attrs["rate_hz"]), n_samples=int(g.attrs["n_samples"]),
                sigma_uv=read("sigma_uv"), floor_sigma=float(g.attrs["floor_sigma"]),
                polarity=str(g.attrs["polarity"]), excluded=_read_excluded(g, len(g["sigma_uv"])))
        t.check()
        return t

    def check(self) -> None:
        """Refuse a table whose context or columns are out of range (as strictly as options)."""
        if not (math.isfinite(self.rate_hz) and 100 <= self.rate_hz <= 1e6):
            raise RigsideError(f"event table sampling rate must be between 100 Hz and 1 MHz, got {self.rate_hz!r}")
        if not 1 <= self.n_samples <= MAX_SAMPLES:
            raise RigsideError(f"event table recording length must be from 1 to {MAX_SAMPLES} samples, "
                               f"got {self.n_samples}")
        s = self.sigma_uv
        if s.ndim != 1 or not 1 <= len(s) <= 4096 or not (np.isfinite(s).all() and (s >= 0).all()):
            raise RigsideError(f"event table noise sigmas must be 1 to 4096 finite values of at least 0 uV, "
                               f"got shape {s.shape}")
        if not (math.isfinite(self.floor_sigma) and self.floor_sigma > 0):
            raise RigsideError(f"event table look-up floor must be above 0 sigma, got {self.floor_sigma!r}")
        if self.polarity not in POLARITIES:
            raise RigsideError(f"event table polarity must be one of {', '.join(POLARITIES)}, got {self.polarity!r}")
        if not len(self):
            return
        if np.any(np.diff(self.sample) < 0) or self.sample[0] < 0 or self.sample[-1] >= self.n_samples \
                or self.channel.min() < 0 or self.channel.max() >= self.n_channels:
            raise RigsideError("event table must hold time-sorted samples inside the recording and "
                               "valid channels, got values out of range")
        if self.group.min() < 0 or self.group.max() >= self.n_channels:
            raise RigsideError(f"event groups must be from 0 to {self.n_channels - 1}, got "
                               f"{int(self.group.min())}..{int(self.group.max())}")
        group_of = np.zeros(self.n_channels, dtype=np.int32)
        group_of[self.channel] = self.group          # one group per channel, whichever event wrote it
        if np.any(group_of[self.channel] != self.group):
            raise RigsideError("events of one channel must all belong to one group, got a channel in two groups")
        a = self.amplitude_sigma
        if not (np.isfinite(self.amplitude_uv).all() and not np.isnan(a).any() and (a >= 0).all()):
            raise RigsideError("event amplitudes must be finite numbers (in sigma: at least 0), "
                               "got NaN, infinite or negative values")
        if self.x_um is not None and not (np.isfinite(self.x_um).all() and np.isfinite(self.y_um).all()):
            raise RigsideError("event positions must be finite numbers of micrometres, got NaN or infinite values")

    @classmethod
    def read_h5(cls, path: str | Path, group: str = "events") -> "EventTable":
        try:
            with h5py.File(path, "r") as f:
                if group not in f:
                    raise RigsideError(f"HDF5 file must hold an '{group}' group, got {str(path)!r}")
                return cls.from_h5_group(f[group])
        except OSError as exc:
            raise RigsideError(f"event file must be a readable HDF5 file, got {str(path)!r}: {exc}") from None


_CSV_DIGITS = {"time_s": 6, "amplitude_uv": 3, "amplitude_sigma": 4, "x_um": 2, "y_um": 2}


def _csv_format(table: EventTable, column: str) -> tuple:
    """How :func:`rigside.core.io.csv_text.write_rows` formats one column of the event CSV."""
    values = getattr(table, column)
    return ("fixed", values, _CSV_DIGITS[column]) if column in _CSV_DIGITS else ("int", values)


def _read_excluded(g: h5py.Group, n_channels: int) -> dict[int, str]:
    """The stored excluded channels (none in files written before they were recorded)."""
    text = g.attrs.get("excluded_channels", "{}")
    try:
        doc = json.loads(text)
        if not all(isinstance(r, str) for r in doc.values()):
            raise TypeError
        out = {int(c): r for c, r in doc.items()}
    except (TypeError, ValueError, AttributeError, RecursionError):
        raise RigsideError(f"excluded channels must be a JSON object of channel: flag, "
                           f"got {str(text)[:40]!r}") from None
    if any(not 0 <= c < n_channels for c in out):
        raise RigsideError(f"excluded channels must lie in 0..{n_channels - 1}, got {sorted(out)}")
    return out
