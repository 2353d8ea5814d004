"""Export of curated spike times: CSV, one NumPy file per unit, and a binned spike matrix.

Files written into the output directory (each atomically; the folder as a whole follows
:mod:`rigside.core.exports.folder`: the manifest is written last, and files of an earlier export that
this one does not write are removed):

- ``unit_times.csv``: columns ``unit,label,time_s``, rows by unit id then time; times are
  ``sample / rate_hz`` in seconds with 7 decimals (0.1 microsecond). Events in no unit (id -1) are not exported.
- ``unit_<id>.npy``: float64 spike times in seconds of each unit.
- ``binned.h5``: dataset ``counts`` (units x bins, uint16) with datasets ``unit_id`` (int32),
  ``unit_label`` (variable-length UTF-8 strings, the label name of each row) and attributes ``bin_s``,
  ``n_bins``, ``duration_s``, ``edges``. Bin ``k`` counts the spikes with
  ``k * bin_s <= time_s < (k + 1) * bin_s``; ``n_bins = ceil(duration_s / bin_s)``, so the
  last bin may reach past the end of the recording.
- ``export.json``: what was written, from which session, with which program version;
  ``complete`` (false while an export is under way or was interrupted) and ``files`` (name: bytes);
  ``units`` lists each unit (id, label, group, spike count, file) and, on a recording with site
  positions, its position ``x_um``, ``y_um`` (micrometres, the unit table's: the medians of its events').
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Sequence

import h5py
import numpy as np

from rigside.core import __version__
from rigside.core.errors import RigsideError
from rigside.core.events import EventTable
from rigside.core.exports.folder import ExportFolder
from rigside.core.io.atomic import atomic_write
from rigside.core.io.csv_text import write_rows
from rigside.core.io.h5image import h5_in_memory
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.quality.unit_position import unit_position
from rigside.core.units.journal import utc_now
from rigside.core.units.sorting import LABELS, Sorting

MAX_COUNT = np.iinfo(np.uint16).max
CSV_NAME, BINNED_NAME = "unit_times.csv", "binned.h5"
TIME_DECIMALS = 7
"""Decimals of a second in ``unit_times.csv`` (0.1 microsecond)."""
MAX_MATRIX_BYTES = 32 << 30
"""Largest uncompressed spike matrix (units x bins x 2 bytes) an export may declare."""
BLOCK_BINS = 1 << 20
"""Bins of one unit binned and written at a time (blocks without spikes keep the fill value 0)."""


def check_binning(duration_s: float, bin_ms: float, n_units: int) -> int:
    """The bin count of an export, refused (:class:`RigsideError`) before anything is written
    when the bin width is not a positive number or the matrix would exceed :data:`MAX_MATRIX_BYTES`."""
    if not (isinstance(bin_ms, (int, float)) and math.isfinite(bin_ms) and bin_ms > 0):
        raise RigsideError(f"bin width must be a finite number of milliseconds above 0, got {bin_ms!r}")
    ratio = duration_s / (bin_ms / 1000.0) if bin_ms / 1000.0 > 0 else math.inf
    rows = max(1, n_units)
    limit = MAX_MATRIX_BYTES // (2 * rows)
    if not ratio <= limit:
        shortest = duration_s * 1000.0 / limit
        raise RigsideError(f"bin width must give at most {limit} bins per unit for {rows} units (a spike "
                           f"matrix of at most {MAX_MATRIX_BYTES >> 30} GiB), got {ratio:.3g} bins of "
                           f"{bin_ms:g} ms over {duration_s:g} s (use at least {shortest:.3g} ms)")
    return bin_count(duration_s, bin_ms / 1000.0)


def bin_count(duration_s: float, bin_s: float) -> int:
    """Number of bins of ``bin_s`` covering ``[0, duration_s)`` (tolerant to rounding of the ratio)."""
    return max(1, math.ceil(duration_s / bin_s - 1e-9))


def bin_index(times_s: np.ndarray, bin_s: float, n_bins: int) -> np.ndarray:
    """Bin of each time under ``k * bin_s <= t < (k + 1) * bin_s`` (edges computed as ``k * bin_s``)."""
    t = np.asarray(times_s, dtype=np.float64)
    k = np.floor(t / bin_s).astype(np.int64)
    k -= (k * bin_s) > t                      # the division rounded up across an edge
    k += ((k + 1) * bin_s) <= t               # the division rounded down across an edge
    if len(k) and (k.min() < 0 or k.max() >= n_bins):
        raise RigsideError(f"spike times must lie within the {n_bins} bins (0 to {n_bins * bin_s:g} s), "
                           f"got {t.min():g} to {t.max():g} s")
    return k


def _write_counts(ds: h5py.Dataset, row: int, bins: np.ndarray, unit: int) -> None:
    """Store one unit's spike counts block by block, so memory follows the spikes, not the bins."""
    k, c = np.unique(bins, return_counts=True)
    if c.size and c.max() > MAX_COUNT:
        raise RigsideError(f"spikes per bin must be at most {MAX_COUNT}, got {int(c.max())} in unit {unit}")
    n_bins = ds.shape[1]
    for b in np.unique(k // BLOCK_BINS):
        lo, hi = int(b) * BLOCK_BINS, min(n_bins, (int(b) + 1) * BLOCK_BINS)
        block = np.zeros(hi - lo, dtype=np.uint16)
        inside = (k >= lo) & (k < hi)
        block[k[inside] - lo] = c[inside]
        ds[row, lo:hi] = block


def _write_npy(path: Path, values: np.ndarray) -> Path:
    def write(tmp: Path) -> None:
        with open(tmp, "wb") as fh:
            np.save(fh, values, allow_pickle=False)
    return atomic_write(path, write)


def write_unit_times(path: str | Path, trains: dict[int, np.ndarray], labels: dict[int, str],
                     cancel: CancelFn = None) -> Path:
    """Write ``unit_times.csv`` atomically: ``unit,label,time_s`` rows, times with 7 decimals,
    formatted in blocks (:func:`rigside.core.io.csv_text.write_rows`).

    Parameters
    ----------
    path
        Output file.
    trains, labels
        Spike times (s) and label name of each unit id, in the order to write.
    cancel
        Cancel check (once per unit).
    """
    def write(tmp: Path) -> None:
        with open(tmp, "wb") as fh:
            fh.write(b"unit,label,time_s\n")
            for u, t in trains.items():
                check(cancel)
                write_rows(fh, [("int", np.full(len(t), u)), ("text", np.zeros(len(t), np.int64), [labels[u]]),
                                ("fixed", t, TIME_DECIMALS)])
    return atomic_write(path, write)


def export_sorting(events: EventTable, sorting: Sorting, out_dir: str | Path, bin_ms: float = 1.0,
                   labels: Sequence[str] | None = None, source: str = "",
                   progress: ProgressFn = None, cancel: CancelFn = None) -> dict[str, list[Path]]:
    """Write spike times and the binned matrix of every unit (see the module docstring).

    Parameters
    ----------
    events, sorting
        The event table and the sorting of its events.
    out_dir
        Output directory (created if missing).
    bin_ms
        Bin width of the spike matrix in milliseconds.
    labels
        Export only units with these labels (default: every unit, whatever its label).
    source
        Name of the session, recorded in ``export.json``.
    progress, cancel
        Progress callback and cancel check (one step per unit).

    Returns
    -------
    dict
        Paths written, under ``"csv"``, ``"npy"``, ``"binned"`` and ``"manifest"``.
    """
    if labels is not None and not set(labels) <= set(LABELS):
        raise RigsideError(f"export labels must be among {', '.join(LABELS)}, got {sorted(set(labels))}")
    if len(sorting.data) != len(events):
        raise RigsideError(f"sorting must cover the event table ({len(events)} events), got {len(sorting.data)}")
    units = {u: rec for u, rec in sorting.units.items() if labels is None or rec.label in labels}
    n_bins = check_binning(events.duration_s, bin_ms, len(units))
    bin_s = bin_ms / 1000.0
    folder = ExportFolder(out_dir, [f"unit_{u}.npy" for u in units] + [CSV_NAME, BINNED_NAME])
    times = events.time_s
    written: dict[str, list[Path]] = {"csv": [], "npy": [], "binned": [], "manifest": []}
    trains, places = {}, {}
    for i, u in enumerate(units):
        check(cancel)
        report(progress, 0.5 * i / max(1, len(units)), f"spike times of unit {u}")
        idx = sorting.events_of(u)
        t = times[idx]
        trains[u] = t
        if events.x_um is not None and len(idx):
            x, y = unit_position(events.x_um[idx], events.y_um[idx])
            places[u] = {"x_um": round(x, 2), "y_um": round(y, 2)}
        written["npy"].append(_write_npy(folder.path(f"unit_{u}.npy"), t))

    written["csv"].append(write_unit_times(folder.path(CSV_NAME), trains,
                                           {u: r.label for u, r in units.items()}, cancel))

    def write_binned(tmp: Path) -> None:
        with h5_in_memory(tmp) as f:
            packed = {"chunks": (1, min(n_bins, 1 << 16)), "compression": "gzip",
                      "compression_opts": 1} if units else {}
            ds = f.create_dataset("counts", shape=(len(units), n_bins), dtype=np.uint16, **packed)
            for row, (u, t) in enumerate(trains.items()):
                check(cancel)
                report(progress, 0.5 + 0.5 * row / max(1, len(units)), f"binning unit {u}")
                _write_counts(ds, row, bin_index(t, bin_s, n_bins), u)
            f.create_dataset("unit_id", data=np.array(list(units), dtype=np.int32))
            f.create_dataset("unit_label", data=[r.label for r in units.values()],
                             dtype=h5py.string_dtype("utf-8"))
            f.attrs.update(bin_s=bin_s, n_bins=n_bins, duration_s=events.duration_s,
                           edges="bin k holds spikes with k*bin_s <= time_s < (k+1)*bin_s")
    written["binned"].append(atomic_write(folder.path(BINNED_NAME), write_binned))

    manifest = {"program_version": __version__, "exported_utc": utc_now(), "source": source,
                "bin_s": bin_s, "n_bins": n_bins, "duration_s": events.duration_s,
                "units": [{"unit": u, "label": r.label, "group": r.group, "count": len(trains[u]),
                           "file": f"unit_{u}.npy"} | places.get(u, {}) for u, r in units.items()]}
    written["manifest"].append(folder.finish(manifest))
    report(progress, 1.0, "export done")
    return written


def export_units(session, out_dir: str | Path, bin_ms: float = 1.0, labels: Sequence[str] | None = None,
                 progress: ProgressFn = None, cancel: CancelFn = None) -> dict[str, list[Path]]:
    """Export a loaded :class:`rigside.core.units.session.Session` (see :func:`export_sorting`)."""
    return export_sorting(session.events, session.sorting, out_dir, bin_ms, labels,
                          str(session.source or ""), progress, cancel)
