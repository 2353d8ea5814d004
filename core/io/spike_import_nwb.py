"""The units table of an NWB file as imported spike trains (see :mod:`rigside.core.io.spike_import`)."""

from __future__ import annotations

import warnings
from pathlib import Path

import h5py
import numpy as np

from rigside.core.errors import SpikeFileError
from rigside.core.io.spike_import import NamedIds, declared_budget

NAME_COLUMN = "unit_name"
"""Text column of the units table naming each unit (kept as the unit's id)."""


def read_nwb(path: Path, rate_hz: float | None = None) -> tuple[np.ndarray, ...]:
    """The units table of an NWB file: ``spike_times`` (seconds) of every unit id, or of every unit
    name when the table has a ``unit_name`` column."""
    if not h5py.is_hdf5(path):
        raise SpikeFileError(f"{path.name} must be an NWB (HDF5) file, got another type or a truncated file")
    try:
        import pynwb
    except ImportError:
        raise SpikeFileError("reading NWB files needs the pynwb package, got none installed "
                             "(pip install pynwb)") from None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")        # namespace-version notices of old files
            with pynwb.NWBHDF5IO(str(path), "r") as nio:
                nwb = nio.read()
                table = nwb.units
                if table is None or "spike_times" not in table.colnames:
                    raise SpikeFileError(f"{path.name} must hold a units table with spike_times, got none")
                col = table["spike_times"]
                values, ends = col.target.data, col.data
                for what, ds in (("spike_times", values), ("spike_times_index", ends)):
                    arr_kind = np.dtype(ds.dtype).kind
                    if arr_kind not in "iuf" or len(ds.shape) != 1:
                        raise SpikeFileError(f"{path.name}: {what} must be a 1-D numeric column, got "
                                             f"{ds.dtype} with shape {ds.shape}")
                if values.shape[0] * 8 + ends.shape[0] * 8 > declared_budget(path):
                    raise SpikeFileError(f"{path.name}: units table must fit the file size, got "
                                         f"{values.shape[0]} spikes declared")
                times = np.asarray(values[:], dtype=np.float64)
                ends = np.asarray(ends[:], dtype=np.int64)
                ids = np.asarray(table.id[:])
                names = _unit_names(table, len(ids), path) if NAME_COLUMN in table.colnames else None
    except SpikeFileError:
        raise
    except Exception as exc:   # pynwb/hdmf raise many types for broken files; report them all
        raise SpikeFileError(f"{path.name} must be a readable NWB file, got {type(exc).__name__}: {exc}") from None
    if len(ids) != len(ends) or (len(ends) and (np.any(np.diff(ends) < 0) or ends[0] < 0
                                                or ends[-1] != len(times))):
        raise SpikeFileError(f"{path.name}: the units table index must split the {len(times)} spike times "
                             f"into {len(ids)} units, got inconsistent offsets")
    counts = np.diff(np.concatenate([[0], ends]))
    if names is not None:
        return times, NamedIds(np.repeat(np.arange(len(ids)), counts), names), np.asarray(names)
    return times, np.repeat(ids, counts), ids


def _unit_names(table, n_units: int, path: Path) -> tuple[str, ...]:
    """The ``unit_name`` column: one text per unit."""
    col = table[NAME_COLUMN]
    data = getattr(col, "data", col)
    if len(data) != n_units or getattr(data, "ndim", 1) != 1:
        raise SpikeFileError(f"{path.name}: {NAME_COLUMN} must hold one name per unit ({n_units}), got "
                             f"{len(data)}")
    values = [v.decode("utf-8", "replace") if isinstance(v, bytes) else v for v in data[:]]
    if not all(isinstance(v, str) for v in values):
        raise SpikeFileError(f"{path.name}: {NAME_COLUMN} must hold text, got {type(values[0]).__name__} values")
    return tuple(values)
