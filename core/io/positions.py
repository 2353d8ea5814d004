"""Site positions of a probe: where they come from (metadata ``[probe]`` table, HDF5 attributes,
a positions CSV file) and the checks they pass (:func:`rigside.core.io.layout.check_positions`).

Positions are in micrometres in the plane of the probe: ``x_um`` across it, ``y_um`` along it
(depth), and ``shank`` an integer from 0 (one shank when absent).
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

from rigside.core.errors import RecordingError
from rigside.core.io.layout import check_positions

POSITION_KEYS = ("x_um", "y_um", "shank")
"""Keys of the metadata ``[probe]`` table and names of the HDF5 attributes."""
CSV_REQUIRED = ("channel", "x_um", "y_um")
MAX_CSV_BYTES = 16 << 20


def site_arrays(x_um, y_um, shank, n_channels: int):
    """Checked positions as arrays: ``(positions, shank)``, float64 (channels, 2) ``x_um, y_um`` and
    int64 shank per channel (all 0 when ``shank`` is None)."""
    import numpy as np

    check_positions(list(x_um), list(y_um), None if shank is None else list(shank), n_channels)
    positions = np.column_stack([np.asarray(x_um, np.float64), np.asarray(y_um, np.float64)])
    return positions, np.zeros(n_channels, np.int64) if shank is None else np.asarray(shank, np.int64)


def site_order(channels, positions, shank):
    """Channels ordered as their sites lie on the probe, for stacking traces top to bottom: by shank,
    then from the largest ``y_um`` (farthest from the tip) down to the tip, then by ``x_um``.

    Parameters
    ----------
    channels
        Channel indices to order.
    positions, shank
        ``(channels, 2)`` site positions (um) and shank of every channel of the recording.

    Returns
    -------
    numpy.ndarray
        The same channels (int64) in probe order.
    """
    import numpy as np

    chans = np.asarray(channels, dtype=np.int64)
    pos, sh = np.asarray(positions, dtype=np.float64)[chans], np.asarray(shank)[chans]
    return chans[np.lexsort((chans, pos[:, 0], -pos[:, 1], sh))]


def probe_from_table(table, source: str) -> tuple[list, list, list | None]:
    """``(x_um, y_um, shank)`` from a metadata ``[probe]`` table (``shank`` None when absent)."""
    if not isinstance(table, dict):
        raise RecordingError(f"metadata [probe] must be a table of arrays x_um, y_um and optionally shank, "
                             f"got {str(table)[:40]!r} in {source}")
    unknown = sorted(set(table) - set(POSITION_KEYS))
    if unknown:
        raise RecordingError(f"metadata [probe] keys must be among {', '.join(POSITION_KEYS)}, "
                             f"got {', '.join(unknown)} in {source}")
    return table.get("x_um"), table.get("y_um"), table.get("shank")


def probe_to_table(x_um, y_um, shank) -> dict:
    """The metadata ``[probe]`` table of positions (plain Python numbers)."""
    out = {"x_um": [float(v) for v in x_um], "y_um": [float(v) for v in y_um]}
    if shank is not None:
        out["shank"] = [int(v) for v in shank]
    return out


def probe_from_attrs(attrs, n_channels: int, source: str) -> tuple[list, list, list | None] | None:
    """Positions from HDF5 attributes ``x_um``, ``y_um`` (and ``shank``), None when there are none."""
    import numpy as np

    if not any(k in attrs for k in POSITION_KEYS):
        return None
    found = []
    for key in POSITION_KEYS:
        if key not in attrs:
            found.append(None)
            continue
        value = np.asarray(attrs[key])
        kind = "iu" if key == "shank" else "iuf"
        if value.ndim != 1 or value.dtype.kind not in kind:
            what = "integers" if key == "shank" else "numbers"
            raise RecordingError(f"HDF5 attribute {key} must be a 1-D array of {what} (one per channel), "
                                 f"got {value.dtype} with shape {value.shape} in {source}")
        found.append(value.tolist())
    check_positions(*found, n_channels, where=f" in the HDF5 attributes of {source}")
    return found[0], found[1], found[2]


def read_positions_csv(path: str | Path, n_channels: int) -> tuple[list, list, list | None]:
    """Read a positions file: columns ``channel,x_um,y_um`` and optionally ``shank``, one row per channel.

    Parameters
    ----------
    path
        The CSV file (UTF-8, any column order, every channel from 0 to ``n_channels - 1`` exactly once).
    n_channels
        Channel count of the recording.

    Returns
    -------
    tuple
        ``(x_um, y_um, shank)`` lists in channel order (``shank`` None without the column), checked
        by :func:`rigside.core.io.layout.check_positions`.
    """
    where = f" in {str(path)!r}"
    try:
        with open(path, "rb") as fh:
            raw = fh.read(MAX_CSV_BYTES + 1)
        text = raw.decode("utf-8-sig")
    except FileNotFoundError:
        raise RecordingError(f"positions file must exist, got {str(path)!r}") from None
    except IsADirectoryError:
        raise RecordingError(f"positions file must be a file, got the directory {str(path)!r}") from None
    except UnicodeDecodeError as exc:
        raise RecordingError(f"positions file must be UTF-8 text{where}, got {exc}") from None
    if len(raw) > MAX_CSV_BYTES:
        raise RecordingError(f"positions file must be at most {MAX_CSV_BYTES >> 20} MiB, got more{where}")
    rows = list(csv.reader(io.StringIO(text)))
    rows = [r for r in rows if any(cell.strip() for cell in r)]
    if not rows:
        raise RecordingError(f"positions file must start with the header channel,x_um,y_um[,shank], got an "
                             f"empty file{where}")
    header = [h.strip() for h in rows[0]]
    missing = [c for c in CSV_REQUIRED if c not in header]
    unknown = [c for c in header if c not in (*CSV_REQUIRED, "shank")]
    if missing or unknown or len(set(header)) != len(header):
        raise RecordingError(f"positions file header must be channel,x_um,y_um and optionally shank, got "
                             f"{','.join(header)[:80]!r}{where}")
    return _columns(rows[1:], header, n_channels, where)


def _columns(rows: list[list[str]], header: list[str], n_channels: int, where: str):
    """Values of each column in channel order, every channel exactly once."""
    if len(rows) != n_channels:
        raise RecordingError(f"positions file must hold one row per channel ({n_channels}), got {len(rows)}{where}")
    by_channel: dict[int, dict[str, str]] = {}
    for line, row in enumerate(rows, start=2):
        if len(row) != len(header):
            raise RecordingError(f"positions file rows must hold {len(header)} cells, got {len(row)} on line "
                                 f"{line}{where}")
        cells = {h: v.strip() for h, v in zip(header, row)}
        channel = _integer(cells["channel"], "channel", line, where)
        if not 0 <= channel < n_channels or channel in by_channel:
            raise RecordingError(f"positions file channels must be 0 to {n_channels - 1}, each once, got "
                                 f"{channel} on line {line}{where}")
        by_channel[channel] = cells
    x, y = ([_number(by_channel[c][k], k, where) for c in range(n_channels)] for k in ("x_um", "y_um"))
    shank = ([_integer(by_channel[c]["shank"], "shank", None, where) for c in range(n_channels)]
             if "shank" in header else None)
    check_positions(x, y, shank, n_channels, where=where)
    return x, y, shank


def _integer(text: str, what: str, line: int | None, where: str) -> int:
    try:
        return int(text)
    except ValueError:
        at = f" on line {line}" if line else ""
        raise RecordingError(f"positions file {what} must be an integer, got {text[:20]!r}{at}{where}") from None


def _number(text: str, what: str, where: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise RecordingError(f"positions file {what} must be a number, got {text[:20]!r}{where}") from None
