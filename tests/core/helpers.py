"""Small builders shared by the core tests (invented data, for ground-truth checks only)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from rigside.core.io.recording import Layout, RawRecording, write_metadata


def write_raw(path: Path, data: np.ndarray, rate_hz: float = 30000.0, gain_uv: float = 1.0,
              groups: list[list[int]] | None = None, offset_uv: float = 0.0) -> RawRecording:
    """Write ``data`` (samples x channels) as a raw file with metadata and open it."""
    data = np.ascontiguousarray(data)
    data.tofile(path)
    layout = Layout(channels=data.shape[1], rate_hz=rate_hz, dtype=str(data.dtype), gain_uv=gain_uv,
                    offset_uv=offset_uv, groups=groups)
    write_metadata(path, layout)
    return RawRecording(path, layout)


def gaussian(n: int, channels: int, sigma: float = 1.0, seed: int = 0) -> np.ndarray:
    return (np.random.default_rng(seed).standard_normal((n, channels)) * sigma).astype(np.float32)


def write_nwb_units(path: Path, spike_times: dict[int, np.ndarray], description: str = "earlier sorting") -> None:
    """An NWB file whose units table holds these spike times (s) per unit id (written by pynwb, the
    reference implementation; the test is skipped without the nwb extra)."""
    from datetime import datetime, timezone

    import pytest

    pynwb = pytest.importorskip("pynwb")
    nwb = pynwb.NWBFile(session_description=description, identifier=Path(path).stem,
                        session_start_time=datetime(2020, 1, 1, tzinfo=timezone.utc))
    for u, t in spike_times.items():
        nwb.add_unit(spike_times=t, id=u)
    with pynwb.NWBHDF5IO(str(path), "w") as io:
        io.write(nwb)
