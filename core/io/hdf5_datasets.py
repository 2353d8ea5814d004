"""Which dataset of an HDF5 file holds the recording: never a silent pick among several."""

from __future__ import annotations

from pathlib import Path

import h5py

from rigside.core.errors import RecordingError
from rigside.core.io.nwb_series import is_nwb, series_paths


def two_d_datasets(f: h5py.File) -> list[str]:
    """Paths of the numeric 2-D datasets stored in ``f`` (links to other files are not followed)."""
    found: list[str] = []

    def visit(name, obj):
        if isinstance(obj, h5py.Dataset) and obj.ndim == 2 and obj.dtype.kind in "iuf":
            found.append(name)
    f.visititems(visit)
    return found


def recording_candidates(path: str | Path) -> list[str]:
    """The 2-D datasets of the HDF5 file ``path`` that could hold the recording ([] if not HDF5);
    for an NWB file, its ``ElectricalSeries``."""
    try:
        with h5py.File(path, "r") as f:
            return series_paths(f) if is_nwb(f) else two_d_datasets(f)
    except (OSError, RuntimeError, ValueError):
        return []


def choose_dataset(f: h5py.File, dataset: str | None) -> str:
    """The dataset named ``dataset``, or the only 2-D one; several without a name are refused,
    naming them, and so is a dataset shaped channels x samples (with a hint to transpose)."""
    if dataset is None:
        names = two_d_datasets(f)
        if not names:
            raise RecordingError(f"HDF5 recording must hold a 2-D dataset (samples x channels) of numeric "
                                 f"type, got none in {f.filename!r}")
        if len(names) > 1:
            raise RecordingError(f"HDF5 recording with several 2-D datasets must be given one with --dataset, "
                                 f"got {len(names)} candidates: {', '.join(names[:10])}")
        dataset = names[0]
    if dataset not in f or not isinstance(f[dataset], h5py.Dataset):
        raise RecordingError(f"HDF5 recording must hold a 2-D dataset (samples x channels), got none named "
                             f"{dataset!r} in {f.filename!r}")
    ds = f[dataset]
    if ds.ndim != 2 or ds.dtype.kind not in "iuf":
        raise RecordingError(f"HDF5 recording dataset must be 2-D numeric (samples x channels), "
                             f"got shape {ds.shape} of {ds.dtype}")
    if ds.shape[0] < ds.shape[1]:
        raise RecordingError(f"HDF5 recording dataset must be oriented samples x channels, got shape {ds.shape} "
                             f"in {dataset!r}: fewer samples than channels, so it is probably stored channels "
                             f"x samples (transpose it)")
    return dataset
