"""Opening a recording in the window: the questions a file may need answered first."""

from __future__ import annotations

import os
from pathlib import Path

import h5py

from rigside.core.io.hdf5_datasets import recording_candidates
from rigside.core.io.recording import RawRecording, metadata_path, nwb_candidates, open_recording, write_metadata
from rigside.gui.dialogs.hdf5_dataset import DatasetDialog
from rigside.gui.dialogs.raw_layout import RawLayoutDialog


def open_with_dialogs(win, path: str, options: dict):
    """Open ``path`` for the window ``win``, asking what the file cannot say: the layout of a raw file
    without metadata (then saved beside it), the dataset of an HDF5 file holding several, or the
    ElectricalSeries of an NWB file holding several.
    None when the user cancels."""
    p = Path(path)
    has_layout = options.get("channels") is not None and options.get("rate_hz") is not None
    readable = p.is_file() and p.stat().st_size > 0 and win.interactive
    key = "series" if readable and nwb_candidates(p) is not None else "dataset"
    if readable and h5py.is_hdf5(p) and options.get(key) is None:
        candidates = recording_candidates(p)
        if len(candidates) > 1:
            dialog = DatasetDialog(p, candidates, win, nwb=key == "series")
            if dialog.exec() != DatasetDialog.DialogCode.Accepted:
                return None
            options = {**options, key: dialog.dataset()}
    elif readable and not h5py.is_hdf5(p) and metadata_path(p) is None and not has_layout:
        dialog = RawLayoutDialog(p, win)
        if dialog.exec() != RawLayoutDialog.DialogCode.Accepted:
            return None
        rec = RawRecording(p, dialog.layout_value())
        save_layout_beside(win, p, rec.layout)
        return rec
    return open_recording(p, **options)


def save_layout_beside(win, path: Path, layout) -> None:
    """Keep the entered layout as the metadata file beside the data, so the command line and the
    next opening use it (skipped, with a note, when the folder is not writable)."""
    if not os.access(path.parent, os.W_OK):
        win.statusBar().showMessage(f"Layout not saved: {path.parent} is not writable.", 15000)
        return
    try:
        meta = write_metadata(path, layout)
    except OSError as exc:
        win.statusBar().showMessage(f"Layout not saved: {exc}", 15000)
        return
    win.statusBar().showMessage(f"Layout saved as {meta.name}.", 15000)
