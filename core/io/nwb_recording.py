"""NWB recordings: one ``ElectricalSeries`` of an NWB file, read-only, streamed from its dataset.

The series is found and described by :mod:`rigside.core.io.nwb_series` (h5py only); samples are
read block by block with HDF5 hyperslab reads (``data[start:stop]``), never the whole dataset,
through a chunk cache large enough for the usual chunk shapes. Samples go to microvolts with
the series' ``conversion``, ``offset`` and ``channel_conversion``: one gain for all channels
rides on the layout like any stored file; per-channel gains are applied in :meth:`read_stored`.
"""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np

from rigside.core.errors import RecordingError
from rigside.core.io.columns import take_channels
from rigside.core.io.h5safe import stored_dataset
from rigside.core.io.layout import Layout
from rigside.core.io.nwb_series import (
    choose_series,
    electrode_layout,
    is_nwb,
    series_paths,
    series_scaling,
    series_timing,
)
from rigside.core.io.recording_base import Recording

CHUNK_CACHE_BYTES = 64 << 20
"""HDF5 chunk cache of an open NWB file (a chunk read once serves every block it overlaps)."""


class NWBRecording(Recording):
    """An NWB ``ElectricalSeries`` (samples x channels), chosen with ``series`` when there are several."""

    def __init__(self, path: str | Path, series: str | None = None, allow_external: bool = False):
        self.path = Path(path)
        try:
            self._file = h5py.File(self.path, "r", rdcc_nbytes=CHUNK_CACHE_BYTES, rdcc_nslots=100_003)
        except FileNotFoundError:
            raise RecordingError(f"recording file must exist, got {str(path)!r}") from None
        except OSError as exc:
            raise RecordingError(f"NWB recording must be a readable HDF5 file, got {str(path)!r}: {exc}") from None
        try:
            self._setup(series, allow_external)
        except RecordingError:
            self._file.close()
            raise
        except (OSError, RuntimeError, KeyError, ValueError, TypeError, AttributeError) as exc:
            self._file.close()
            raise RecordingError(f"NWB recording must be a readable NWB file, got {str(path)!r}: "
                                 f"{type(exc).__name__}: {exc}") from None

    def _setup(self, series: str | None, allow_external: bool) -> None:
        f = self._file
        if not is_nwb(f):
            raise RecordingError(f"NWB recording must carry the NWB root mark (neurodata_type NWBFile), "
                                 f"got an HDF5 file of another layout: {str(self.path)!r}")
        self.series = choose_series(f, series)
        g = f[self.series]
        if not isinstance(g.get("data"), h5py.Dataset):
            raise RecordingError(f"NWB ElectricalSeries {self.series!r} must hold a data dataset, got none")
        self._ds = stored_dataset(f, f"{self.series}/data", allow_external, RecordingError)
        ds = self._ds
        if ds.ndim not in (1, 2) or ds.dtype.kind not in "iuf":
            raise RecordingError(f"NWB ElectricalSeries data must be numeric samples x channels, got shape "
                                 f"{ds.shape} of {ds.dtype} in {self.series!r}")
        self._one_channel = ds.ndim == 1
        self.n_samples = int(ds.shape[0])
        self.n_channels = 1 if self._one_channel else int(ds.shape[1])
        if self.n_samples == 0 or self.n_channels == 0:
            raise RecordingError(f"NWB ElectricalSeries must hold at least one sample and one channel, got shape "
                                 f"{ds.shape} in {self.series!r}")
        rate, self.start_time_s = series_timing(g, self.n_samples)
        scaling = series_scaling(g, ds, self.n_channels)
        electrodes = electrode_layout(f, g, self.n_channels)
        self._gains = None if scaling.uniform else scaling.gain_uv.astype(np.float32)
        self.float_data = ds.dtype.kind == "f"
        self.layout = Layout(channels=self.n_channels, rate_hz=rate, dtype="float32",
                             gain_uv=float(scaling.gain_uv[0]) if scaling.uniform else 1.0,
                             offset_uv=scaling.offset_uv, groups=electrodes.groups,
                             group_names=electrodes.group_names, x_um=electrodes.x_um, y_um=electrodes.y_um,
                             shank=electrodes.shank)
        self.layout.validate()
        self.rate_hz = self.layout.rate_hz
        self.position_note = electrodes.position_note
        self._init_groups(electrodes.groups, electrodes.group_names)
        if electrodes.x_um is not None:
            self.set_positions(electrodes.x_um, electrodes.y_um, electrodes.shank)

    def read_stored(self, start, stop, channels=None):
        """Samples as stored, or in microvolts before the offset when channels have their own gains."""
        try:
            block = self._ds[start:stop]
        except (OSError, RuntimeError) as exc:
            raise RecordingError(f"NWB recording must be readable at samples {start}..{stop}, got {exc}") from None
        if self._one_channel:
            block = block[:, None]
        if self._gains is not None:
            block = block.astype(np.float32) * self._gains
        return take_channels(block, channels)

    def describe(self) -> dict:
        """The plain description, with the series (its name as NWB names it, and its path in the file),
        its start time and where positions came from."""
        return super().describe() | {"series": self.series.rsplit("/", 1)[-1], "series_path": self.series,
                                     "start_time_s": self.start_time_s,
                                     "positions": self.position_note}

    def close(self) -> None:
        self._file.close()


def nwb_candidates(path: str | Path) -> list[str] | None:
    """The ``ElectricalSeries`` of the NWB file ``path``; None when it is not an NWB file."""
    try:
        with h5py.File(path, "r") as f:
            return series_paths(f) if is_nwb(f) else None
    except (OSError, RuntimeError, ValueError):
        return None
