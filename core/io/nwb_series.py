"""Finding and describing an NWB ``ElectricalSeries`` with h5py alone (no pynwb needed to read).

An NWB file (the field's open standard, HDF5 underneath) is recognised by its root attribute
``neurodata_type = "NWBFile"``. Its ``ElectricalSeries`` groups hold ``data`` (samples x channels,
or samples for one channel; the ``conversion`` and ``offset`` attributes turn stored values into
volts, an optional ``channel_conversion`` dataset scales each channel), the timing
(``starting_time`` with a ``rate`` attribute, or one ``timestamps`` value per sample) and
``electrodes``, the rows of the electrodes table the channels were recorded on. That table's
``group_name`` (or ``group`` references) gives the electrode group of each channel, and
``rel_x``/``rel_y`` (preferred: the place on the electrode) or ``x``/``y`` its position.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import h5py
import numpy as np

from rigside.core.errors import RecordingError
from rigside.core.io.layout import check_positions

VOLTS_TO_UV = {"volts": 1e6, "volt": 1e6, "v": 1e6, "millivolts": 1e3, "mv": 1e3,
               "microvolts": 1.0, "uv": 1.0, "\u00b5v": 1.0}
"""Units an ``ElectricalSeries`` may state for its data, and their factor to microvolts."""
TIMESTAMP_BLOCK = 1 << 20
"""Timestamps are checked this many at a time (never all at once)."""
REGULAR_SHARE = 0.25
"""Timestamps are regular when every one lies within this share of a sample period of the
evenly spaced times from the first to the last."""


def text(value) -> str:
    """An HDF5 attribute or cell as text (bytes decoded as UTF-8, anything else ``str``)."""
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    return str(value)


def is_nwb(f: h5py.File) -> bool:
    """True when the open HDF5 file carries the NWB root mark (``neurodata_type = "NWBFile"``)."""
    return text(f.attrs.get("neurodata_type", "")) == "NWBFile"


def series_paths(f: h5py.File) -> list[str]:
    """Paths of the ``ElectricalSeries`` groups of ``f`` (those under ``acquisition`` first)."""
    found: list[str] = []

    def visit(name, obj):
        if isinstance(obj, h5py.Group) and text(obj.attrs.get("neurodata_type", "")) == "ElectricalSeries":
            found.append(name)
    f.visititems(visit)
    return sorted(found, key=lambda p: (not p.startswith("acquisition/"), p))


def choose_series(f: h5py.File, series: str | None) -> str:
    """The series named ``series`` (its path, or its name when only one has it), or the only one;
    several without a name are refused, listing them."""
    paths = series_paths(f)
    if not paths:
        raise RecordingError(f"NWB recording must hold an ElectricalSeries, got none in {f.filename!r}")
    if series is None:
        if len(paths) > 1:
            raise RecordingError(f"NWB recording with several ElectricalSeries must be given one with --series, "
                                 f"got {len(paths)} candidates: {', '.join(paths[:10])}")
        return paths[0]
    wanted = series.strip("/")
    hits = [p for p in paths if p == wanted] or [p for p in paths if p.rsplit("/", 1)[-1] == wanted]
    if len(hits) != 1:
        got = f"{len(hits)} series named so: {', '.join(hits)}" if hits else f"the candidates {', '.join(paths[:10])}"
        raise RecordingError(f"--series must name one ElectricalSeries of the file, got {series!r} and {got}")
    return hits[0]


def _number(value, what: str) -> float:
    a = np.asarray(value)
    if a.size != 1 or a.dtype.kind not in "iuf" or not math.isfinite(float(a.reshape(-1)[0])):
        raise RecordingError(f"NWB {what} must be one finite number, got {str(value)[:40]!r}")
    return float(a.reshape(-1)[0])


@dataclass
class Scaling:
    """Stored values to microvolts: ``stored * gain_uv[channel] + offset_uv``."""

    gain_uv: np.ndarray
    offset_uv: float

    @property
    def uniform(self) -> bool:
        """One gain for every channel (then the recording's layout carries it)."""
        return bool(np.all(self.gain_uv == self.gain_uv[0]))


def series_scaling(g: h5py.Group, data: h5py.Dataset, n_channels: int) -> Scaling:
    """``conversion``, ``offset`` and ``channel_conversion`` of a series, in microvolts."""
    unit = text(data.attrs.get("unit", "volts")).strip().lower()
    if unit not in VOLTS_TO_UV:
        raise RecordingError(f"NWB ElectricalSeries data unit must be volts, got {unit!r}")
    factor = VOLTS_TO_UV[unit]
    conversion = _number(data.attrs.get("conversion", 1.0), "data conversion")
    offset = _number(data.attrs.get("offset", 0.0), "data offset")
    gains = np.full(n_channels, conversion * factor)
    if "channel_conversion" in g:
        cc = g["channel_conversion"]
        if not isinstance(cc, h5py.Dataset) or cc.shape != (n_channels,) or cc.dtype.kind not in "iuf":
            raise RecordingError(f"NWB channel_conversion must hold one number per channel ({n_channels}), "
                                 f"got {getattr(cc, 'shape', cc)}")
        gains = gains * np.asarray(cc[()], dtype=np.float64)
    if not np.all(np.isfinite(gains) & (gains != 0)):
        raise RecordingError("NWB conversion times channel_conversion must be finite and non-zero for every "
                             "channel, got 0, NaN or infinite values")
    return Scaling(gains, offset * factor)


def series_timing(g: h5py.Group, n_samples: int) -> tuple[float, float]:
    """Sampling rate (Hz) and start time (s) from ``starting_time``/``rate`` or regular timestamps."""
    if "starting_time" in g:
        st = g["starting_time"]
        if not isinstance(st, h5py.Dataset) or "rate" not in st.attrs:
            raise RecordingError("NWB starting_time must be a dataset with a rate attribute, got none")
        return _number(st.attrs["rate"], "rate"), _number(st[()], "starting_time")
    if "timestamps" not in g:
        raise RecordingError("NWB ElectricalSeries must give starting_time with a rate, or timestamps, got neither")
    ts = g["timestamps"]
    if not isinstance(ts, h5py.Dataset) or ts.shape != (n_samples,) or ts.dtype.kind not in "iuf":
        raise RecordingError(f"NWB timestamps must hold one number per sample ({n_samples}), "
                             f"got {getattr(ts, 'shape', ts)}")
    if n_samples < 2:
        raise RecordingError(f"NWB timestamps must hold at least 2 samples to give a rate, got {n_samples}")
    first, last = float(ts[0]), float(ts[n_samples - 1])
    period = (last - first) / (n_samples - 1)
    if not (math.isfinite(period) and period > 0):
        raise RecordingError(f"NWB timestamps must increase, got {first:g} s first and {last:g} s last")
    previous = first
    for lo in range(0, n_samples, TIMESTAMP_BLOCK):
        block = np.asarray(ts[lo:lo + TIMESTAMP_BLOCK], dtype=np.float64)
        steps = np.diff(block, prepend=previous)[1 if lo == 0 else 0:]
        uneven = np.flatnonzero(~(np.abs(steps - period) <= 2 * REGULAR_SHARE * period))
        drift = np.abs(block - (first + period * np.arange(lo, lo + len(block))))
        if len(uneven) or not np.all(drift <= REGULAR_SHARE * period):
            if len(uneven):
                k = lo + int(uneven[0]) + (1 if lo == 0 else 0)
                where = f"{float(ts[k]) - float(ts[k - 1]):.6g} s between samples {k - 1} and {k}"
            else:
                k = lo + int(np.argmax(~(drift <= REGULAR_SHARE * period)))
                where = f"sample {k} {float(drift[k - lo]) / period:.2f} sample periods off the even spacing"
            raise RecordingError(f"NWB timestamps must be evenly spaced (a fixed sampling rate), got irregular "
                                 f"timestamps: {where} (mean spacing {period:.6g} s)")
        previous = float(block[-1])
    return 1.0 / period, first


@dataclass
class ElectrodeLayout:
    """What the electrodes table says about the channels of one series."""

    groups: list[list[int]]
    group_names: list[str]
    x_um: list[float] | None = None
    y_um: list[float] | None = None
    shank: list[int] | None = None
    position_note: str = "no positions in the electrodes table"


def _table(f: h5py.File, region: h5py.Dataset) -> h5py.Group:
    ref = region.attrs.get("table")
    table = f[ref] if isinstance(ref, h5py.Reference) and ref else f.get("general/extracellular_ephys/electrodes")
    if not isinstance(table, h5py.Group):
        raise RecordingError("NWB electrodes of the series must point into an electrodes table, got none")
    return table


def _column(table: h5py.Group, name: str, rows: np.ndarray) -> np.ndarray | None:
    ds = table.get(name)
    if not isinstance(ds, h5py.Dataset) or ds.ndim != 1:
        return None
    if len(rows) and rows.max() >= ds.shape[0]:
        raise RecordingError(f"NWB electrodes table column {name} must hold a row for every electrode of the "
                             f"series, got {ds.shape[0]} rows and electrode {int(rows.max())}")
    return ds[()][rows] if ds.shape[0] <= 65536 else np.asarray([ds[int(r)] for r in rows])


def _group_names(f: h5py.File, table: h5py.Group, rows: np.ndarray) -> list[str] | None:
    names = _column(table, "group_name", rows)
    if names is not None:
        return [text(n) for n in names]
    refs = _column(table, "group", rows)
    if refs is None:
        return None
    return [f[r].name.rsplit("/", 1)[-1] if isinstance(r, h5py.Reference) and r else "" for r in refs]


def electrode_layout(f: h5py.File, g: h5py.Group, n_channels: int) -> ElectrodeLayout:
    """Channel groups (electrode groups, in order of first channel) and positions of a series."""
    region = g.get("electrodes")
    if not isinstance(region, h5py.Dataset) or region.shape != (n_channels,) or region.dtype.kind not in "iu":
        raise RecordingError(f"NWB ElectricalSeries electrodes must list one electrode row per channel "
                             f"({n_channels}), got {getattr(region, 'shape', region)}")
    rows = np.asarray(region[()], dtype=np.int64)
    if len(rows) and rows.min() < 0:
        raise RecordingError(f"NWB electrodes rows must be non-negative, got {int(rows.min())}")
    table = _table(f, region)
    names = _group_names(f, table, rows) or ["all channels"] * n_channels
    order = list(dict.fromkeys(names))
    groups = [[c for c in range(n_channels) if names[c] == n] for n in order]
    out = ElectrodeLayout(groups, order)
    for xs, ys in (("rel_x", "rel_y"), ("x", "y")):
        x, y = _column(table, xs, rows), _column(table, ys, rows)
        if x is None or y is None or x.dtype.kind not in "iuf" or y.dtype.kind not in "iuf":
            continue
        shank = [order.index(n) for n in names]
        try:
            check_positions(x.astype(float).tolist(), y.astype(float).tolist(), shank, n_channels)
        except RecordingError as exc:
            out.position_note = f"{xs}/{ys} not used as positions: {exc}"
            continue
        out.x_um, out.y_um, out.shank = x.astype(float).tolist(), y.astype(float).tolist(), shank
        out.position_note = f"positions from {xs}/{ys} (taken as micrometres), one shank per electrode group"
        break
    return out
