"""Figures of the HTML audit report, drawn with matplotlib and returned as inline SVG strings.

Each function takes plain arrays and returns one ``<svg>`` element (no XML prolog, no
external files, text kept as text). matplotlib is imported inside the functions, on the
first figure, so importing :mod:`core` stays fast; figures are built as bare
``matplotlib.figure.Figure`` objects rendered by the SVG backend, never through pyplot or
a window backend.
"""

from __future__ import annotations

import io
import itertools
import re

import numpy as np

from rigside.core.audit.imported import WaveformSummary

IMPORTED, FRESH = "#c0612b", "#2b7a8c"
SIDE_LABELS = {IMPORTED: "imported unit", FRESH: "best fresh match"}
_SALTS = itertools.count(1)   # a fresh hash salt per figure keeps SVG ids unique within one page
_PROLOG = re.compile(r"^.*?(?=<svg)", re.S)
_GROUP_ID = re.compile(r'<g id="[^"]*"')


MAX_POINTS = 2000
"""Most spikes drawn per side in the amplitude figure (every k-th spike beyond that)."""


def _figure(width_in: float, height_in: float, constrained: bool = False, top_in: float = 0.3):
    """A bare figure. Per-unit figures get fixed margins in inches: the constrained layout engine
    cost four times the rest of a small figure (a 100-unit report spent minutes in it); only the
    one overlap matrix with its colour bar uses it."""
    from matplotlib.figure import Figure  # lazy: about a second to import

    if constrained:
        return Figure(figsize=(width_in, height_in), layout="constrained")
    fig = Figure(figsize=(width_in, height_in))
    fig.subplots_adjust(left=0.62 / width_in, right=1 - 0.12 / width_in, bottom=0.5 / height_in,
                        top=1 - top_in / height_in, wspace=0.12)
    return fig


def svg_of(fig, salt: str | None = None) -> str:
    """``fig`` rendered as one inline ``<svg>`` element (no prolog, no metadata, text as text).

    ``salt`` seeds the SVG ids; figures of one page need different salts (default: a counter of this
    process; figures drawn in other processes pass their own, e.g. the unit and the figure's name)."""
    import matplotlib

    buf = io.StringIO()
    with matplotlib.rc_context({"svg.fonttype": "none",
                                "svg.hashsalt": f"rigside-{next(_SALTS) if salt is None else salt}"}):
        fig.savefig(buf, format="svg", metadata={"Creator": None, "Date": None, "Format": None, "Type": None})
    return _GROUP_ID.sub("<g", _PROLOG.sub("", buf.getvalue(), count=1))


def _small_text(ax) -> None:
    ax.tick_params(labelsize=7)
    ax.xaxis.label.set_size(8)
    ax.yaxis.label.set_size(8)
    ax.title.set_size(9)


def overlap_figure(matrix: np.ndarray, row_ids, col_ids: np.ndarray, salt: str | None = None) -> str:
    """Overlap (Jaccard index, 0 to 1) of imported units (rows: ids or names) with fresh units (columns),
    with a colour bar (``salt`` as in :func:`svg_of`)."""
    m = np.asarray(matrix, float)
    fig = _figure(min(12.0, 2.4 + 0.16 * m.shape[1]), min(12.0, 1.6 + 0.16 * m.shape[0]), constrained=True)
    ax = fig.add_subplot()
    cells = ax.pcolormesh(np.ma.masked_less_equal(m, 0.0), vmin=0.0, vmax=1.0, cmap="viridis", edgecolors="face",
                          linewidth=0.2)
    ax.set_facecolor("#e8e8e8")
    ax.invert_yaxis()
    ax.set_xticks(np.arange(m.shape[1]) + 0.5, [str(int(u)) for u in col_ids], rotation=90)
    ax.set_yticks(np.arange(m.shape[0]) + 0.5, [str(u) for u in row_ids])
    ax.set_xlabel("fresh unit")
    ax.set_ylabel("imported unit")
    ax.set_title("grey: no shared spikes")
    _small_text(ax)
    ax.tick_params(labelsize=6)
    bar = fig.colorbar(cells, ax=ax, shrink=0.9)
    bar.set_label("overlap (Jaccard index)", size=8)
    bar.ax.tick_params(labelsize=7)
    return svg_of(fig, salt)


def waveform_figure(sides: list[tuple[WaveformSummary, str]], salt: str | None = None) -> str:
    """Mean waveform +-1 SD per channel, one panel per channel of the first side's group.

    ``sides`` holds (summary, colour) pairs; channels of a later side missing from the first
    side's group are not drawn; ``salt`` as in :func:`svg_of` (so for the figures below).
    """
    first = sides[0][0]
    channels = [int(c) for c in first.channels]
    fig = _figure(1.0 + 1.25 * len(channels), 2.3, top_in=0.55)
    axes = fig.subplots(1, len(channels), sharey=True, squeeze=False)[0]
    for summary, color in sides:
        column = {int(c): k for k, c in enumerate(summary.channels)}
        for ax, c in zip(axes, channels):
            if c not in column:
                continue
            k, t = column[c], summary.times_ms
            ax.fill_between(t, summary.mean[:, k] - summary.sd[:, k], summary.mean[:, k] + summary.sd[:, k],
                            color=color, alpha=0.15, linewidth=0)
            ax.plot(t, summary.mean[:, k], color=color, linewidth=1.2)
    for ax, c in zip(axes, channels):
        ax.set_title(f"channel {c}")
        ax.set_xlabel("time (ms)")
        _small_text(ax)
    axes[0].set_ylabel("voltage (µV)")
    fig.suptitle("mean waveform ±1 SD", size=9)
    return svg_of(fig, salt)


def isi_figure(hists: list[tuple[np.ndarray, np.ndarray, str]], refractory_ms: float, salt: str | None = None) -> str:
    """Inter-spike-interval histograms (counts, edges in ms, colour) with the refractory period."""
    fig = _figure(3.2, 2.3)
    ax = fig.add_subplot()
    for counts, edges_ms, color in hists:
        ax.stairs(counts, edges_ms, color=color, linewidth=1.2, label=SIDE_LABELS.get(color))
    ax.axvline(refractory_ms, color="#888888", linestyle="--", linewidth=0.8,
               label=f"refractory period ({refractory_ms:g} ms)")
    ax.set_xlim(0, max(float(e[-1]) for _, e, _ in hists))
    ax.set_ylim(bottom=0)
    ax.set_xlabel("inter-spike interval (ms)")
    ax.set_ylabel("count")
    ax.set_title("ISI histogram")
    ax.legend(fontsize=6, frameon=False)
    _small_text(ax)
    return svg_of(fig, salt)


def amplitude_figure(sides: list[tuple[np.ndarray, np.ndarray, str]], duration_s: float,
                     salt: str | None = None) -> str:
    """Spike amplitude over the recording: (times in s, amplitudes in uV, colour) per side."""
    fig = _figure(3.8, 2.3)
    ax = fig.add_subplot()
    step = max(1, -(-max(len(t) for t, _, _ in sides) // MAX_POINTS))
    for t, a, color in sides:
        t, a = t[::step], a[::step]
        ax.plot(t, a, linestyle="none", marker="o", markersize=1.6, markeredgewidth=0, color=color, alpha=0.6,
                label=SIDE_LABELS.get(color))
    ax.set_xlim(0, duration_s)
    ax.set_xlabel("time in recording (s)")
    ax.set_ylabel("amplitude (µV)")
    ax.set_title("amplitude over time" + (f" (every {step}th spike)" if step > 1 else ""))
    ax.legend(fontsize=6, frameon=False, markerscale=3)
    _small_text(ax)
    return svg_of(fig, salt)
