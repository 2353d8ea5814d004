"""The interface every recording reader shares (raw binary, HDF5, NWB): sample and channel
counts, rate, channel groups, and reads in microvolts."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np

from rigside.core.errors import RecordingError
from rigside.core.io import positions as sites
from rigside.core.io.layout import check_groups


class Recording:
    """Interface of every reader. Subclasses set the attributes and implement ``read_stored``."""

    path: Path
    n_samples: int
    n_channels: int
    rate_hz: float
    groups: list[np.ndarray]
    group_names: list[str]
    float_data: bool = False
    content_hash: str | None = None   # "xxh3-128:<hex>" of the whole file once a full pass computed it
    positions: np.ndarray | None = None   # (channels, 2) float64 x_um, y_um of each site, or None
    shank: np.ndarray | None = None       # shank of each site (int64) when positions are known
    groups_given: bool = False

    def _init_groups(self, groups: list[list[int]] | None, names: list[str] | None) -> None:
        self.groups_given = bool(groups)
        groups = groups if groups else [list(range(self.n_channels))]
        check_groups(groups, self.n_channels)
        grouped = {c for g in groups for c in g}
        rest = [c for c in range(self.n_channels) if c not in grouped]
        groups = [list(g) for g in groups] + [[c] for c in rest]
        self.groups = [np.asarray(g, dtype=np.int64) for g in groups]
        names = list(names or [])
        self.group_names = [names[i] if i < len(names) else f"group {i}" for i in range(len(groups))]
        self.channel_group = np.empty(self.n_channels, dtype=np.int32)
        for gi, g in enumerate(self.groups):
            self.channel_group[g] = gi

    def set_positions(self, x_um, y_um, shank=None) -> None:
        """Give every channel a site position (checked); without given groups, each shank becomes a group."""
        self.positions, self.shank = sites.site_arrays(x_um, y_um, shank, self.n_channels)
        if not self.groups_given:
            shanks = np.unique(self.shank).tolist()
            self._init_groups([np.flatnonzero(self.shank == k).tolist() for k in shanks],
                              [f"shank {k}" for k in shanks])
            self.groups_given = False

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
        if self.layout.total_offset_uv:
            out += np.float32(self.layout.total_offset_uv)
        return out

    def check_finite(self, stored: np.ndarray, start: int, channels: np.ndarray | None) -> None:
        """Raise if float data holds NaN or Inf (integer data cannot)."""
        if self.float_data and stored.size and not np.isfinite(stored).all():
            bad = np.argwhere(~np.isfinite(stored))[0]
            channel = int(bad[1]) if channels is None else int(channels[bad[1]])
            raise RecordingError(f"recording must hold finite values, got NaN or Inf at sample "
                                 f"{start + int(bad[0])}, channel {channel}")

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
        out = {"path": str(self.path), "format": type(self).__name__, "n_samples": self.n_samples,
               "n_channels": self.n_channels, "rate_hz": self.rate_hz,
               "groups": [g.tolist() for g in self.groups], "group_names": self.group_names}
        if self.positions is not None:
            out |= sites.probe_to_table(self.positions[:, 0], self.positions[:, 1], self.shank)
        return out

    def truth_path(self) -> Path | None:
        """Ground-truth spike file written beside a synthetic recording, if any."""
        p = self.path.with_name(self.path.stem + ".truth.csv")
        return p if p.exists() else None

    def close(self) -> None:
        """Release the file."""
