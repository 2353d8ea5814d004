"""A per-unit table kept in a session's state part (the quality numbers the window shows).

The units floor stores the table without knowing what it means: the quality floor
(:mod:`rigside.core.quality.stored_numbers`) builds it, with the settings it was computed at as
``key`` and a ``members`` column naming each unit's events, and decides on opening which rows are
still current. Layout in the state part (optional; files without it open as before)::

    /unit_numbers          attrs key (text)
      /unit_numbers/<column>   float64 or int64, one value per row (numeric columns)
      /unit_numbers/text       UTF-8 JSON object {column: [text per row]} (text columns)
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Callable

import h5py
import numpy as np

from rigside.core.errors import SessionError
from rigside.core.io.h5safe import array, attr, text, write_text
from rigside.core.textparse import parse_json

GROUP = "unit_numbers"
TEXT = "text"


@dataclass
class StoredTable:
    """Columns of equal length (numeric arrays, or sequences of text) and the key they were made at."""

    key: str
    columns: dict[str, np.ndarray] = field(default_factory=dict)


def _is_text(values: np.ndarray) -> bool:
    return values.dtype.kind in "UOS"


def write_table(f: h5py.Group, table: StoredTable, store: Callable) -> None:
    """Write ``table`` as the ``unit_numbers`` group of ``f`` (each dataset by ``store``)."""
    g = f.create_group(GROUP)
    g.attrs["key"] = table.key
    texts = {}
    for name, values in table.columns.items():
        values = np.asarray(values)
        if name == TEXT or "/" in name:
            raise SessionError(f"stored column names must be plain names other than {TEXT!r}, got {name!r}")
        if _is_text(values):
            texts[name] = [str(v) for v in values.tolist()]
        else:
            store(g, name, np.ascontiguousarray(values, dtype=np.int64 if values.dtype.kind in "biu" else np.float64))
    write_text(g, TEXT, json.dumps(texts), store)


def read_table(f: h5py.File, data: dict[str, np.ndarray]) -> StoredTable | None:
    """The table in the state part ``f`` (its datasets read and verified in ``data``), or None when
    the file has none (sessions saved before it existed)."""
    if GROUP not in f:
        return None
    g = f[GROUP]
    texts = parse_json(text(data, f"{GROUP}/{TEXT}"), "stored unit numbers", SessionError)
    if not isinstance(texts, dict) or not all(isinstance(v, list) and all(isinstance(s, str) for s in v)
                                              for v in texts.values()):
        raise SessionError("stored unit numbers' text must map column names to lists of text, got other values")
    columns: dict[str, np.ndarray] = {}
    for name in g:
        if name != TEXT:
            kind = "i8" if g[name].dtype.kind in "iu" else "f8"
            columns[name] = array(data, f"{GROUP}/{name}", kind, 1)
    columns.update({name: np.array(v, dtype=str) for name, v in texts.items()})
    lengths = {len(v) for v in columns.values()}
    if len(lengths) > 1:
        raise SessionError(f"stored unit numbers must have columns of one length, got lengths {sorted(lengths)}")
    return StoredTable(attr(g, "key", str, GROUP), columns)
