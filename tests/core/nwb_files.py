"""NWB files written with pynwb (the standard's reference implementation) for the reader tests."""

from __future__ import annotations

import datetime
from pathlib import Path

import numpy as np


def write_nwb(path: Path, data: np.ndarray, *, rate_hz: float | None = 30000.0, conversion: float = 1e-6,
              offset: float = 0.0, channel_conversion=None, groups: list[list[int]] | None = None,
              positions: tuple | None = None, position_columns=("rel_x", "rel_y"), timestamps=None,
              series=("raw",), chunks=None) -> Path:
    """Write ``data`` (samples x channels) as one or more ElectricalSeries in ``acquisition``.

    ``groups`` become electrode groups (named ``tt0``, ``tt1``, ...), ``positions`` = (x, y)
    per channel go in the ``position_columns`` of the electrodes table; ``chunks`` stores the
    data chunked (and uncompressed) with that chunk shape.
    """
    import pynwb
    from hdmf.backends.hdf5.h5_utils import H5DataIO
    from pynwb.ecephys import ElectricalSeries

    n_ch = data.shape[1] if data.ndim == 2 else 1
    groups = groups or [list(range(n_ch))]
    nwb = pynwb.NWBFile(session_description="invented test recording", identifier="rigside-test",
                        session_start_time=datetime.datetime(2026, 1, 1, tzinfo=datetime.timezone.utc))
    device = nwb.create_device("test probe")
    if positions is not None:
        for col in position_columns:
            if col not in ("x", "y"):
                nwb.add_electrode_column(col, f"{col} of the channel (um)")
    by_channel = {c: gi for gi, g in enumerate(groups) for c in g}
    egroups = [nwb.create_electrode_group(f"tt{gi}", description="wire bundle", location="cortex", device=device)
               for gi in range(len(groups))]
    for c in range(n_ch):
        extra = {}
        if positions is not None:
            extra = {position_columns[0]: float(positions[0][c]), position_columns[1]: float(positions[1][c])}
        nwb.add_electrode(group=egroups[by_channel[c]], location="cortex", **extra)
    region = nwb.create_electrode_table_region(list(range(n_ch)), "all channels")
    stored = H5DataIO(data, chunks=chunks) if chunks else data
    for name in series:
        timing = {"rate": float(rate_hz)} if timestamps is None else {"timestamps": timestamps}
        kwargs = {"channel_conversion": np.asarray(channel_conversion, dtype=float)} \
            if channel_conversion is not None else {}
        nwb.add_acquisition(ElectricalSeries(name=name, data=stored, electrodes=region, conversion=conversion,
                                             offset=offset, **timing, **kwargs))
    with pynwb.NWBHDF5IO(str(path), "w") as io:
        io.write(nwb)
    return path
