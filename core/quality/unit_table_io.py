"""Writing the per-unit quality table to CSV, and flagging units against limits.

CSV layout (our own): comment lines starting with ``#`` first — a title, the caution that
quality numbers are estimates, the metric settings, and one line per column giving its
meaning and unit — then a header row of column names and one row per unit. Numbers are
written with 6 significant digits, undefined ones as ``nan``. Readers that skip ``#``
lines (``numpy.genfromtxt``, ``pandas.read_csv(comment="#")``) load it directly.
"""

from __future__ import annotations

import csv
import math
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Collection

import numpy as np

from rigside.core.errors import ParamError, RigsideError
from rigside.core.io.atomic import atomic_write
from rigside.core.quality.metric_settings import censored_note
from rigside.core.quality.unit_position import POSITION_COLUMNS
from rigside.core.quality.unit_table import CAUTION, COLUMNS, INT_COLUMNS, MetricParams, described_columns


@dataclass(frozen=True)
class Limit:
    """A limit on one column: ``kind`` "max" flags values above ``value``, "min" below it."""

    column: str
    kind: str
    value: float

    def __post_init__(self) -> None:
        if self.column not in COLUMNS or self.column.endswith("_reason") or self.column in INT_COLUMNS:
            raise ParamError(f"limit column must be a metric column of the unit table, got {self.column!r}")
        if self.kind not in ("max", "min"):
            raise ParamError(f"limit kind must be max or min, got {self.kind!r}")
        if not math.isfinite(self.value):
            raise ParamError(f"limit value must be a finite number, got {self.value!r}")

    @property
    def name(self) -> str:
        return f"{self.column} {'>' if self.kind == 'max' else '<'} {self.value:g}"


DEFAULT_LIMITS = (
    Limit("contamination", "max", 0.10),        # common practice, no source
    Limit("isolation_distance", "min", 20.0),   # common practice, no source [memory]
    Limit("l_ratio", "max", 0.05),              # common practice, no source [memory]
    Limit("presence_ratio", "min", 0.9),        # common practice, no source
    Limit("missed_fraction", "max", 0.10),      # common practice, no source
)
"""Default limits; every one is a convention of the trade, not a law. Change them freely."""


def reason_column(column: str) -> str | None:
    """The ``*_reason`` column explaining why ``column`` is undefined (None if it has none)."""
    if column.startswith("amplitude_"):
        return "amplitude_drift_reason"
    return f"{column}_reason" if f"{column}_reason" in COLUMNS else None


def flag_units(table: dict[str, np.ndarray], limits=DEFAULT_LIMITS) -> dict[str, np.ndarray]:
    """Per-unit flags: which units lie beyond each limit.

    Parameters
    ----------
    table
        A table from :func:`rigside.core.quality.unit_table.unit_metrics_table`.
    limits
        :class:`Limit` objects.

    Returns
    -------
    dict of str to numpy.ndarray
        For each limit (key :attr:`Limit.name`), a boolean array, True for units whose number
        is beyond the limit. An undefined number (NaN) is never a breach: it is its own state
        (see :func:`undefined_units`). Key ``"any"`` is True for units beyond at least one limit.
    """
    n = len(table["unit"])
    flags: dict[str, np.ndarray] = {}
    for lim in limits:
        v = np.asarray(table[lim.column], dtype=np.float64)
        flags[lim.name] = np.isfinite(v) & (v > lim.value if lim.kind == "max" else v < lim.value)
    flags["any"] = np.logical_or.reduce(list(flags.values())) if flags else np.zeros(n, dtype=bool)
    return flags


def undefined_units(table: dict[str, np.ndarray], limits=DEFAULT_LIMITS) -> dict[str, np.ndarray]:
    """For each limited column, True for units whose number is undefined (the limit is not checked)."""
    return {lim.column: ~np.isfinite(np.asarray(table[lim.column], dtype=np.float64)) for lim in limits}


def quality_flag_text(table: dict[str, np.ndarray], limits=DEFAULT_LIMITS) -> list[str]:
    """Per unit, the limits it is beyond ("contamination > 0.1") and the limited numbers that
    are undefined ("isolation_distance undefined: <reason>"), joined by "; "."""
    beyond, undefined = flag_units(table, limits), undefined_units(table, limits)
    out = []
    for i in range(len(table["unit"])):
        parts = [lim.name for lim in limits if beyond[lim.name][i]]
        for lim in limits:
            if undefined[lim.column][i]:
                rc = reason_column(lim.column)
                reason = str(table[rc][i]) if rc and rc in table and str(table[rc][i]) else "no reason recorded"
                parts.append(f"{lim.column} undefined: {reason}")
        out.append("; ".join(dict.fromkeys(parts)))
    return out


FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
"""First characters that make spreadsheets read a cell as a formula."""


def safe_text(value) -> str:
    """A text cell spreadsheets will not run: a leading ``= + - @`` (or tab, CR) gets a single
    quote in front, the usual neutralisation (common practice, no source). Numbers are never
    passed through here."""
    text = str(value)
    return "'" + text if text.startswith(FORMULA_STARTS) else text


def comment_text(line: str) -> str:
    """Text for one ``#`` comment line: line breaks written as the two characters ``\\n``."""
    return line.replace("\r\n", "\\n").replace("\n", "\\n").replace("\r", "\\n")


def _cell(column: str, value) -> str:
    if column.endswith("_reason") or (column not in COLUMNS and column not in POSITION_COLUMNS):
        return str(value)
    if column in INT_COLUMNS:
        return str(int(value))
    return "nan" if math.isnan(value) else f"{float(value):.6g}"


def write_unit_table_csv(table: dict[str, np.ndarray], path: str | Path,
                         params: MetricParams | None = None) -> Path:
    """Write the unit table to ``path`` atomically (temporary file, fsync, rename).

    Parameters
    ----------
    table
        A table from :func:`rigside.core.quality.unit_table.unit_metrics_table`; its position columns
        (a probe) follow :data:`~rigside.core.quality.unit_table.COLUMNS`, and further columns (e.g.
        ``label``) are written after them as text.
    path
        Target CSV file.
    params
        The settings the table was computed with, written into the header (defaults if None).

    Returns
    -------
    Path
        The written file.
    """
    missing = [c for c in COLUMNS if c not in table]
    if missing:
        raise RigsideError(f"unit table must hold every column, got none for {', '.join(missing)}")
    n = len(table["unit"])
    described = described_columns(table)
    if any(len(table[c]) != n for c in described):
        raise RigsideError("unit table columns must all have one row per unit, got differing lengths")
    settings = ", ".join(f"{k} = {v:g}" for k, v in asdict(params or MetricParams()).items())
    columns = list(described) + [c for c in table if c not in described]
    text = [c for c in columns if c.endswith("_reason") or c not in described]
    header = ["rigside unit quality table", CAUTION, f"settings: {settings}", censored_note(params or MetricParams())]
    return write_described_csv(path, header, described, columns, table, _cell, text)


def write_described_csv(path: str | Path, header: list[str], meanings: dict[str, str], columns: list[str],
                        table: dict, cell, text_columns: Collection[str] = ()) -> Path:
    """Write a table as CSV atomically, after ``#`` lines: the ``header`` lines, then one line
    per described column giving its meaning and unit. Comment lines keep line breaks escaped
    (:func:`comment_text`); cells are quoted by :mod:`csv`, so no text can start a row, and
    cells of ``text_columns`` are neutralised for spreadsheets (:func:`safe_text`).

    Parameters
    ----------
    path
        Target file.
    header
        Free text lines (title, cautions, settings).
    meanings
        Column name -> meaning and unit.
    columns
        Columns to write, in order (every one a key of ``table``).
    table
        Column name -> sequence of values, one per row.
    cell
        ``cell(column, value) -> str`` formats one value.
    text_columns
        Columns holding free text (names, notes, reasons), as opposed to numbers.
    """
    n = len(table[columns[0]]) if columns else 0
    text = frozenset(text_columns)

    def write(tmp: Path) -> None:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            for line in header:
                fh.write(f"# {comment_text(line)}\n")
            for name, meaning in meanings.items():
                fh.write(f"# {comment_text(f'{name}: {meaning}')}\n")
            w = csv.writer(fh)
            w.writerow(columns)
            for i in range(n):
                w.writerow([safe_text(cell(c, table[c][i])) if c in text else cell(c, table[c][i])
                            for c in columns])

    return atomic_write(path, write)
