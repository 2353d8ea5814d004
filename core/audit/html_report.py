"""Self-contained HTML report of an audit: one file, plots as inline SVG (:mod:`rigside.core.audit.report_figures`).

Sections: what was compared and the cautions; a summary table (one row per imported unit,
linked to its section); the overlap (Jaccard) matrix; then per imported unit its row of numbers and
three plots beside its closest fresh unit: mean waveforms (+-1 SD) on the group's channels,
ISI histograms and amplitude over time.
"""

from __future__ import annotations

from concurrent.futures import ProcessPoolExecutor
from html import escape
from multiprocessing import get_context
from pathlib import Path

import numpy as np

from rigside.core import __version__
from rigside.core.audit.report_figures import (
    FRESH,
    IMPORTED,
    amplitude_figure,
    isi_figure,
    overlap_figure,
    waveform_figure,
)
from rigside.core.audit.run import CAUTION, AuditResult
from rigside.core.io.atomic import atomic_write
from rigside.core.numbers import format_number
from rigside.core.progress import run_bounded
from rigside.core.quality.correlograms import isi_histogram
from rigside.core.quality.metric_settings import censored_note, metric_settings
from rigside.core.quality.unit_table import CAUTION as QUALITY_CAUTION
from rigside.core.units.clustering import WORKER_START
from rigside.core.units.journal import utc_now

MAX_POINTS = 400          # amplitude points drawn per side (spread subsample)
MAX_MATRIX_COLUMNS = 80
SUMMARY = ("unit", "n_spikes", "matched_fraction", "closest_fresh_unit", "overlap_jaccard", "false_positive_estimate",
           "miss_estimate", "contamination", "isolation_distance", "snr", "notes")
DETAIL = ("group", "main_channel", "peak_offset_ms", "closest_fresh_label", "closest_fresh_spikes",
          "shared_spikes", "spread_over", "rate_hz", "isi_violations", "contamination_poisson",
          "l_ratio", "missed_fraction", "presence_ratio", "amplitude_slope_uv_per_min", "quality_flags")
PLACE = ("x_um", "y_um", "drift_um_per_min")
"""Detail rows on a probe (the table has positions there)."""
STYLE = """body{font-family:sans-serif;margin:24px;color:#222;max-width:1200px}
table{border-collapse:collapse;font-size:12px}td,th{border:1px solid #ccc;padding:2px 6px;text-align:right}
th{background:#f0f0f0}td.t{text-align:left}.caution{background:#fff6e0;border:1px solid #e0c080;padding:8px}
.unit{border-top:2px solid #888;margin-top:24px}.key span{display:inline-block;width:12px;height:12px;
margin:0 4px 0 12px;vertical-align:middle}"""


def _value(v) -> str:
    if isinstance(v, (float, np.floating)):
        return format_number(float(v))
    return escape(str(v))


def _best(result: AuditResult, i: int) -> int | None:
    return result.closest_fresh(int(result.imported_ids[i]))


def _summary(result: AuditResult) -> str:
    t = result.table
    head = "".join(f"<th>{escape(c)}</th>" for c in SUMMARY)
    rows = []
    for i, u in enumerate(t["unit"]):
        cells = []
        for c in SUMMARY:
            v = t[c][i]
            if c == "unit":
                cells.append(f'<td><a href="#u{int(result.imported_ids[i])}">{escape(str(u))}</a></td>')
            elif c == "closest_fresh_unit":
                cells.append(f"<td>{'' if _best(result, i) is None else int(v)}</td>")
            else:
                cells.append(f'<td class="{"t" if c == "notes" else ""}">{_value(v)}</td>')
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><tr>{head}</tr>{''.join(rows)}</table>"


def _matrix(result: AuditResult) -> str:
    a = result.overlap
    if a.size == 0:
        return "<p>No fresh units to compare with.</p>"
    keep = np.flatnonzero(a.max(axis=0) >= 0.05)
    keep = keep[np.argsort(-a[:, keep].max(axis=0), kind="stable")][:MAX_MATRIX_COLUMNS]
    keep = np.sort(keep)
    if len(keep) == 0:
        return "<p>No fresh unit overlaps (Jaccard) at least 0.05 with any imported unit.</p>"
    note = "" if len(keep) == a.shape[1] else (f"<p>Showing the {len(keep)} of {a.shape[1]} fresh units "
                                               f"overlapping (Jaccard) at least 0.05 with some imported unit.</p>")
    return note + overlap_figure(a[:, keep], [result.unit_name(u) for u in result.imported_ids],
                                 result.fresh_ids[keep], salt="matrix")


def _isi(t_imp: np.ndarray, t_fresh: np.ndarray | None) -> list:
    sides = [(t_imp, IMPORTED)] + ([(t_fresh, FRESH)] if t_fresh is not None else [])
    hists = []
    for t, color in sides:
        counts, edges = isi_histogram(t, 0.001, 0.05)
        hists.append((counts, edges * 1000, color))
    return hists


def _spread(times: np.ndarray, amps: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    if len(times) <= MAX_POINTS:
        return times, amps
    k = np.round(np.linspace(0, len(times) - 1, MAX_POINTS)).astype(np.int64)
    return times[k], amps[k]


def _plot_inputs(result: AuditResult, i: int) -> tuple:
    """What the three plots of imported unit ``i`` draw (small arrays only, so it can go to another process)."""
    unit = int(result.imported_ids[i])
    best = _best(result, i)
    fresh = result.fresh_waveforms.get(best)
    waves = [(result.placements[unit].waveform, IMPORTED)] + ([(fresh, FRESH)] if fresh is not None else [])
    t_fresh = result.fresh.train(best)[0] if best is not None else None
    amps = [(*_spread(*result.imported_train(unit)), IMPORTED)]
    if best is not None:
        amps.append((*_spread(*result.fresh.train(best)), FRESH))
    return (unit, waves, _isi(result.imported_train(unit)[0], t_fresh), result.fresh.params.metrics.refractory_ms,
            amps, result.fresh.events.duration_s)


def _draw_plots(unit: int, waves: list, hists: list, refractory_ms: float, amps: list, duration_s: float) -> str:
    """The waveform, ISI and amplitude figures of one imported unit (SVG ids salted by the unit)."""
    return (waveform_figure(waves, salt=f"u{unit}-w") + isi_figure(hists, refractory_ms, salt=f"u{unit}-i")
            + amplitude_figure(amps, duration_s, salt=f"u{unit}-a"))


def _all_plots(result: AuditResult, workers: int) -> list[str]:
    """Every unit's plots, drawn in ``workers`` processes when more than one (matplotlib drawing holds the GIL)."""
    tasks = [_plot_inputs(result, i) for i in range(len(result.imported_ids))]
    if workers < 2 or len(tasks) < 2:
        return [_draw_plots(*t) for t in tasks]
    out: list[str] = []
    pool = ProcessPoolExecutor(min(workers, len(tasks)), mp_context=get_context(WORKER_START))
    run_bounded(_draw_plots, tasks, workers, out.append, pool=pool)
    return out


def _unit_section(result: AuditResult, i: int, plots: str) -> str:
    unit = int(result.imported_ids[i])
    best = _best(result, i)
    row = result.row(unit)
    other = result.fresh_quality(best) if best is not None else {}
    facts = "<tr><th></th><th>imported unit</th><th>closest fresh unit</th></tr>" + "".join(
        f"<tr><th>{escape(c)}</th><td class='t'>{_value(row[c])}</td>"
        f"<td class='t'>{_value(other[c]) if c in other else ''}</td></tr>"
        for c in (*DETAIL, *(k for k in PLACE if k in row)))
    match = f"closest fresh unit {best}" if best is not None else "no fresh unit shares its spikes"
    return (f'<div class="unit" id="u{unit}"><h3>Imported unit {escape(result.unit_name(unit))} ({match})</h3>'
            f'<p>{escape(str(row["notes"]))}</p><div>{plots}</div><table>{facts}</table></div>')


def audit_report_html(result: AuditResult, title: str = "Audit of an imported sorting",
                      workers: int | None = None) -> str:
    """The report as one HTML string (no external files, scripts or fonts).

    The per-unit figures are drawn in ``workers`` processes (default: the fresh session's
    ``run.workers``); the page is the same for any number."""
    s = result.settings
    key = (f'<p class="key"><span style="background:{IMPORTED}"></span>imported unit'
           f'<span style="background:{FRESH}"></span>closest fresh unit</p>')
    parts = [f"<!DOCTYPE html><html><head><meta charset='utf-8'><title>{escape(title)}</title>"
             f"<style>{STYLE}</style></head><body><h1>{escape(title)}</h1>",
             f"<p>Imported: <b>{escape(result.spikes.source)}</b> ({len(result.imported_ids)} units, "
             f"{len(result.spikes)} spikes). Compared with: <b>{escape(result.fresh.source)}</b> "
             f"({len(result.fresh_ids)} units). Matching tolerance {s.tolerance_ms:g} ms; "
             f"{escape(censored_note(metric_settings(result.fresh.params)))}. "
             f"Written {utc_now()} by rigside {__version__}.</p>",
             f'<p class="caution">{escape(CAUTION)}<br>{escape(QUALITY_CAUTION)}</p>',
             "<h2>Summary</h2>", _summary(result), "<h2>Overlap (Jaccard) matrix</h2>", _matrix(result),
             "<h2>Units</h2>", key]
    plots = _all_plots(result, result.fresh.params.run.workers if workers is None else workers)
    parts += [_unit_section(result, i, p) for i, p in enumerate(plots)]
    parts.append("</body></html>")
    return "".join(parts)


def write_audit_report(result: AuditResult, path: str | Path, title: str = "Audit of an imported sorting",
                       workers: int | None = None) -> Path:
    """Write :func:`audit_report_html` to ``path`` atomically."""
    html = audit_report_html(result, title, workers)

    def write(tmp: Path) -> None:
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(html)

    return atomic_write(path, write)
