"""Opening a file that may be a session: recognising it by its layout, and what the window takes
from it instead of recomputing (the stored events' noise)."""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np

from rigside.core.errors import RecordingError, SessionError
from rigside.core.events import EventTable
from rigside.core.io.hdf5_datasets import recording_candidates
from rigside.core.signal.noise import NoiseEstimate
from rigside.core.units.session import FORMAT

EXPECTED = ("a recording (raw samples, HDF5 with a 2-D dataset of samples, or NWB with an ElectricalSeries) or a "
            "rigside session "
            f"(HDF5 with format {FORMAT!r})")


def is_session_file(path: str | Path) -> bool:
    """True when ``path`` is an HDF5 file carrying the session layout's marks (the ``format``
    attribute of :data:`rigside.core.units.session.FORMAT` and a ``format_version``), whatever its
    name. The version itself and the content are checked by ``load_session``."""
    p = Path(path)
    if not p.is_file() or not h5py.is_hdf5(p):
        return False
    try:
        with h5py.File(p, "r") as f:
            fmt = f.attrs.get("format")
            fmt = fmt.decode("utf-8", "replace") if isinstance(fmt, bytes) else fmt
            return fmt == FORMAT and "format_version" in f.attrs
    except (OSError, RuntimeError, ValueError):
        return False


def file_kind(path: str | Path) -> str:
    """``"session"`` or ``"recording"`` for a file the window can open.

    Raises
    ------
    RecordingError
        An HDF5 file that is neither a session nor holds a dataset of samples (one line saying
        what was expected).
    """
    p = Path(path)
    if is_session_file(p):
        return "session"
    if p.is_file() and h5py.is_hdf5(p) and not recording_candidates(p):
        raise RecordingError(f"file to open must be {EXPECTED}, got {str(p)!r}, an HDF5 file of another layout")
    return "recording"


def check_session_file(path: str | Path) -> Path:
    """``path`` when it is a session file, else :class:`SessionError` saying what was expected."""
    p = Path(path)
    if not is_session_file(p):
        what = "no file" if not p.exists() else "a file of another layout"
        raise SessionError(f"session file must be a rigside session (HDF5 with format {FORMAT!r}), "
                           f"got {what} at {str(p)!r}")
    return p


def stored_noise(events: EventTable) -> NoiseEstimate:
    """The noise a session's event table was detected at (its per-channel sigma and excluded
    channels), so the threshold and counts are shown without estimating the noise again."""
    n = len(events.sigma_uv)
    return NoiseEstimate(sigma_uv=events.sigma_uv.copy(), window_start_s=np.zeros(0),
                         window_sigma_uv=np.zeros((0, n)), bad=dict(events.excluded))
