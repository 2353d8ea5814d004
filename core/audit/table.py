"""The audit table: one row per imported unit, its audit columns and its quality numbers.

CSV layout (our own, like the unit quality table): ``#`` comment lines first (title, the
cautions, settings, one line per column with its meaning), then a header row and one row per
imported unit. Undefined numbers are written ``nan``; an absent closest fresh unit is left empty.
On a probe the position and drift columns (:data:`PROBE_COLUMNS`) follow.
"""

from __future__ import annotations

import math
from dataclasses import asdict
from pathlib import Path

import numpy as np

from rigside.core.quality.metric_settings import censored_note, metric_settings
from rigside.core.quality.unit_position import POSITION_COLUMNS
from rigside.core.quality.unit_table import CAUTION as QUALITY_CAUTION
from rigside.core.quality.unit_table import COLUMNS as QUALITY_COLUMNS
from rigside.core.quality.unit_table_io import quality_flag_text, write_described_csv
from rigside.core.units.sorting import NO_UNIT

AUDIT_COLUMNS: dict[str, str] = {
    "unit": "imported unit id (its name when the file names its units)",
    "n_spikes": "imported spikes of the unit [count]",
    "peak_offset_ms": "time of the mean waveform's extremum on the main channel relative to the "
                      "imported times [ms]",
    "matched_fraction": "imported spikes with a re-detected event of the unit's channel group within "
                        "the tolerance [fraction]",
    "closest_fresh_unit": "fresh unit with the highest overlap (Jaccard) (empty: none shares a spike)",
    "closest_fresh_label": "label of the closest fresh unit",
    "closest_fresh_spikes": "spikes of the closest fresh unit [count]",
    "shared_spikes": "spikes matched one-to-one between the unit and its closest fresh unit [count]",
    "overlap_jaccard": "shared / (n_spikes + closest_fresh_spikes - shared), Jaccard 1912 [fraction]",
    "false_positive_estimate": "1 - shared / n_spikes: imported spikes the closest fresh unit does not hold "
                               "[fraction, estimate]",
    "miss_estimate": "1 - shared / closest_fresh_spikes: spikes of the closest fresh unit the unit lacks "
                     "[fraction, estimate]",
    "miss_estimate_reason": "why miss_estimate is undefined",
    "spread_over": "fresh units holding at least the spread share of the unit's spikes (share in "
                   "brackets); two or more suggest merged units",
    "notes": "findings worth a look",
    "quality_flags": "quality limits the unit is beyond, and limited numbers that are undefined "
                     "(\"undefined: <reason>\", never counted as beyond)",
}
QUALITY_PART = {k: v for k, v in QUALITY_COLUMNS.items() if k != "unit"}
QUALITY_PART.update({
    "group": "channel group of the main channel (the unit is compared with the events there)",
    "main_channel": "channel where the unit's mean waveform reaches its largest extremum near the "
                    "imported times (every spike is measured there)",
    "isolation_distance": QUALITY_COLUMNS["isolation_distance"] + "; from time windows when the group "
                          "holds many events",
    "l_ratio": QUALITY_COLUMNS["l_ratio"] + "; from time windows when the group holds many events",
})
ALL_COLUMNS = {**AUDIT_COLUMNS, **QUALITY_PART}
SPIKE_PLACE = "; a spike's position is that of the re-detected event it matches, else its main site's"
PROBE_COLUMNS = {k: v + SPIKE_PLACE if k in ("x_um", "y_um") else v for k, v in POSITION_COLUMNS.items()}
"""Columns after :data:`ALL_COLUMNS` on a recording with site positions (absent on bundles)."""
TEXT_COLUMNS = frozenset({"closest_fresh_label", "miss_estimate_reason", "spread_over", "notes", "quality_flags"})


def audit_rows(imp_ids, fresh_ids, matches, overlap, best, n_imp, n_fresh, support, placements,
               quality: dict[str, np.ndarray], labels: dict[int, str], settings,
               shown_ids: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Assemble the audit table (see :data:`AUDIT_COLUMNS`) from the computed pieces.

    ``best`` holds, per imported unit, the column index of its closest fresh unit in ``fresh_ids``
    (-1: none); ``quality`` is the imported units' quality table in the same row order;
    ``shown_ids`` are the imported units as the file gives them (names; default ``imp_ids``).
    """
    m = len(imp_ids)
    has = best >= 0
    col = np.where(has, best, 0)
    rows = np.arange(m)
    shared = np.where(has, matches[rows, col] if matches.size else 0, 0)
    best_n = np.where(has, n_fresh[col] if len(n_fresh) else 0, 0)
    t: dict[str, np.ndarray] = {
        "unit": np.asarray(imp_ids, dtype=np.int64) if shown_ids is None else shown_ids,
        "n_spikes": np.asarray(n_imp, dtype=np.int64),
        "peak_offset_ms": np.array([placements[int(u)].peak_offset_ms for u in imp_ids]),
        "matched_fraction": np.asarray(support, dtype=np.float64),
        "closest_fresh_unit": np.where(has, fresh_ids[col] if len(fresh_ids) else NO_UNIT, NO_UNIT).astype(np.int64),
        "closest_fresh_label": np.array([labels[int(fresh_ids[c])] if h else "" for c, h in zip(col, has)],
                                        dtype=object),
        "closest_fresh_spikes": best_n.astype(np.int64),
        "shared_spikes": shared.astype(np.int64),
        "overlap_jaccard": np.where(has, overlap[rows, col] if overlap.size else 0.0, 0.0),
        "false_positive_estimate": 1.0 - shared / np.asarray(n_imp, dtype=np.float64),
        "miss_estimate": np.where(has, 1.0 - shared / np.maximum(best_n, 1), np.nan),
        "miss_estimate_reason": np.array(["" if h else "no fresh unit shares a spike with this unit"
                                          for h in has], dtype=object),
    }
    shares = matches / np.asarray(n_imp, dtype=np.float64)[:, None] if matches.size else np.zeros((m, 0))
    spread, notes = [], []
    is_best_of: dict[int, list[int]] = {}
    for i in range(m):
        if has[i]:
            is_best_of.setdefault(int(best[i]), []).append(i)
    for i in range(m):
        big = [j for j in np.argsort(-shares[i], kind="stable") if shares[i, j] >= settings.spread_share]
        spread.append("; ".join(f"{int(fresh_ids[j])} ({100 * shares[i, j]:.0f}%)" for j in big))
        notes.append(_notes(i, big, has, best, t, is_best_of, t["unit"], fresh_ids, settings))
    t["spread_over"] = np.array(spread, dtype=object)
    t["notes"] = np.array(notes, dtype=object)
    t["quality_flags"] = np.array(quality_flag_text(quality), dtype=object)
    for k in (*QUALITY_PART, *(c for c in PROBE_COLUMNS if c in quality)):
        t[k] = quality[k]
    return t


def _notes(i, big, has, best, t, is_best_of, imp_ids, fresh_ids, settings) -> str:
    out = []
    if not has[i]:
        out.append("no fresh unit shares its spikes")
    else:
        if t["overlap_jaccard"][i] < settings.weak_overlap:
            out.append(f"weak overlap with the closest fresh unit (Jaccard {t['overlap_jaccard'][i]:.2f})")
        others = [imp_ids[k] for k in is_best_of[int(best[i])] if k != i]
        if others:
            out.append(f"fresh unit {int(fresh_ids[best[i]])} is also the closest fresh unit of imported unit(s) "
                       f"{', '.join(map(str, others))}: possibly split")
    if len(big) >= 2:
        out.append("spikes spread over several fresh units: possibly merged")
    if t["matched_fraction"][i] < 0.5:
        out.append("under half of its spikes have a detected event nearby")
    off = t["peak_offset_ms"][i]
    if abs(off) > settings.tolerance_ms / 2:
        out.append(f"waveform extremum lies {off:+.2f} ms from the imported times")
    return "; ".join(out)


def _cell(column: str, value) -> str:
    if column in TEXT_COLUMNS or column.endswith("_reason") or isinstance(value, str):
        return str(value)
    if column == "closest_fresh_unit":
        return "" if int(value) == NO_UNIT else str(int(value))
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    return "nan" if math.isnan(value) else f"{float(value):.6g}"


def write_audit_csv(result, path: str | Path, caution: str) -> Path:
    """Write the audit table of an :class:`rigside.core.audit.run.AuditResult` to CSV atomically.

    Parameters
    ----------
    result
        The audit result.
    path
        Target file.
    caution
        The audit caution written into the header (with the quality-number caution).
    """
    t = result.table
    s = result.settings
    mp = metric_settings(result.fresh.params)
    settings = ", ".join([f"tolerance_ms = {s.tolerance_ms:g}", f"spread_share = {s.spread_share:g}"]
                         + [f"{k} = {v:g}" for k, v in asdict(mp).items()])
    header = ["rigside audit of an imported sorting",
              f"imported: {result.spikes.source}; compared with: {result.fresh.source}",
              caution, QUALITY_CAUTION, f"settings: {settings}", censored_note(mp)]
    meanings = ALL_COLUMNS | {k: v for k, v in PROBE_COLUMNS.items() if k in t}
    text = TEXT_COLUMNS | {c for c in meanings if c.endswith("_reason")}
    if result.spikes.names:
        text = text | {"unit"}                     # names as given, guarded like every text cell
    return write_described_csv(path, header, meanings, list(meanings), t, _cell, text)
