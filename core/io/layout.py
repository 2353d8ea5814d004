"""How a raw binary file is laid out (channels, rate, sample type, scaling, header, groups),
with the checks every layout passes before a file is opened."""

from __future__ import annotations

import math
from dataclasses import dataclass

from rigside.core.errors import RecordingError

DTYPES = ("int16", "uint16", "int32", "float32")


@dataclass
class Layout:
    """How to interpret a raw file: everything the metadata file or options say."""

    channels: int
    rate_hz: float
    dtype: str = "int16"
    gain_uv: float = 1.0
    offset_uv: float = 0.0
    header_bytes: int = 0
    offset_counts: float = 0.0
    groups: list[list[int]] | None = None
    group_names: list[str] | None = None

    @property
    def total_offset_uv(self) -> float:
        """Microvolts added after the gain: ``offset_uv - offset_counts * gain_uv``."""
        return float(self.offset_uv) - float(self.offset_counts) * float(self.gain_uv)

    def validate(self) -> None:
        if not (is_integer(self.channels) and 1 <= self.channels <= 4096):
            raise RecordingError(f"channel count must be an integer from 1 to 4096, got {self.channels!r}")
        if not (is_number(self.rate_hz) and math.isfinite(self.rate_hz) and 100 <= self.rate_hz <= 1e6):
            raise RecordingError(f"sampling rate must be a number between 100 Hz and 1 MHz, got {self.rate_hz!r}")
        if self.dtype not in DTYPES:
            raise RecordingError(f"sample type must be one of {', '.join(DTYPES)}, got {self.dtype!r}")
        if not (is_number(self.gain_uv) and math.isfinite(self.gain_uv) and self.gain_uv != 0):
            raise RecordingError(f"gain must be a finite non-zero number of microvolts, got {self.gain_uv!r}")
        if not (is_number(self.offset_uv) and math.isfinite(self.offset_uv)):
            raise RecordingError(f"offset must be a finite number of microvolts, got {self.offset_uv!r}")
        if not (is_integer(self.header_bytes) and self.header_bytes >= 0):
            raise RecordingError(f"header length must be a non-negative integer, got {self.header_bytes!r}")
        if not (is_number(self.offset_counts) and math.isfinite(self.offset_counts)):
            raise RecordingError(f"offset in stored counts must be a finite number, got {self.offset_counts!r}")
        if self.groups is not None:
            check_groups(self.groups, self.channels)


def is_integer(v) -> bool:
    """An integer (Python or NumPy), not a bool."""
    import numpy as np  # here, not at the top: the command line's help reads DTYPES without NumPy

    return isinstance(v, (int, np.integer)) and not isinstance(v, (bool, np.bool_))


def is_number(v) -> bool:
    """A real number (Python or NumPy), not a bool."""
    import numpy as np

    return is_integer(v) or isinstance(v, (float, np.floating))


def check_groups(groups: list[list[int]], n_channels: int) -> None:
    """Groups must be non-empty, hold valid channels, and not overlap."""
    seen: set[int] = set()
    for g in groups:
        if not g:
            raise RecordingError("every channel group must hold at least one channel, got an empty group")
        for c in g:
            if not is_integer(c) or not 0 <= c < n_channels:
                raise RecordingError(f"group channels must be integers from 0 to {n_channels - 1}, got {c!r}")
            if c in seen:
                raise RecordingError(f"channel groups must not overlap, got channel {c} twice")
            seen.add(int(c))


def groups_of_size(n_channels: int, size: int) -> list[list[int]]:
    """Consecutive groups of ``size`` channels (the last may be shorter)."""
    if not (isinstance(size, int) and size >= 1):
        raise RecordingError(f"group size must be a positive integer, got {size!r}")
    return [list(range(i, min(i + size, n_channels))) for i in range(0, n_channels, size)]
