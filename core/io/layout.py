"""How a raw binary file is laid out (channels, rate, sample type, scaling, header, groups,
and optionally where each channel sits), with the checks every layout passes before a file is opened."""

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
    x_um: list[float] | None = None
    """Channel positions (micrometres, one per channel; with ``y_um``), when the file says them."""
    y_um: list[float] | None = None
    shank: list[int] | None = None
    """Shank of each channel (positions are distinct within a shank); None: one shank."""

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
        if self.x_um is not None or self.y_um is not None or self.shank is not None:
            check_positions(self.x_um, self.y_um, self.shank, self.channels)


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


def check_positions(x_um, y_um, shank, n_channels: int) -> None:
    """Positions must come as ``x_um`` and ``y_um`` (and optionally ``shank``) with one finite
    value per channel, and no two channels may sit at one position on one shank."""
    if x_um is None or y_um is None:
        raise RecordingError("channel positions must give both x_um and y_um, got only one of them")
    for name, values in (("x_um", x_um), ("y_um", y_um), ("shank", shank)):
        if values is not None and len(values) != n_channels:
            raise RecordingError(f"channel positions {name} must hold one value per channel ({n_channels}), "
                                 f"got {len(values)}")
    for name, values in (("x_um", x_um), ("y_um", y_um)):
        for c, v in enumerate(values):
            if not (is_number(v) and math.isfinite(v)):
                raise RecordingError(f"channel position {name} must be a finite number, got {v!r} for channel {c}")
    shanks = shank if shank is not None else [0] * n_channels
    if not all(is_integer(s) for s in shanks):
        raise RecordingError(f"shank numbers must be integers, got {next(s for s in shanks if not is_integer(s))!r}")
    seen: dict[tuple, int] = {}
    for c, key in enumerate(zip(shanks, x_um, y_um)):
        key = (int(key[0]), float(key[1]), float(key[2]))
        if key in seen:
            raise RecordingError(f"channels must sit at distinct positions on a shank, got channels {seen[key]} "
                                 f"and {c} both at x = {key[1]:g} um, y = {key[2]:g} um on shank {key[0]}")
        seen[key] = c


def groups_of_size(n_channels: int, size: int) -> list[list[int]]:
    """Consecutive groups of ``size`` channels (the last may be shorter)."""
    if not (isinstance(size, int) and size >= 1):
        raise RecordingError(f"group size must be a positive integer, got {size!r}")
    return [list(range(i, min(i + size, n_channels))) for i in range(0, n_channels, size)]
