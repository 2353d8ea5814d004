"""Report figures: well-formed inline SVG with real axes, units and a colour bar, drawn without
any window backend (matplotlib's SVG backend, imported on first use)."""

import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np

from rigside.core.audit.imported import WaveformSummary
from rigside.core.audit.report_figures import (
    FRESH,
    IMPORTED,
    amplitude_figure,
    isi_figure,
    overlap_figure,
    waveform_figure,
)

ROOT = Path(__file__).resolve().parents[2]
SVG = "{http://www.w3.org/2000/svg}"


def texts(svg: str) -> list[str]:
    """Every text of the figure (fonts kept as text, so labels are readable in the file)."""
    assert svg.startswith("<svg") and svg.rstrip().endswith("</svg>")
    return [(t.text or "").strip() for t in ET.fromstring(svg).iter(SVG + "text")]


def summary(channels, shift=0.0):
    t = np.linspace(-0.5, 1.0, 46)
    mean = -100 * np.exp(-(t[:, None] / 0.15) ** 2) * np.ones(len(channels)) + shift
    return WaveformSummary(np.array(channels), t, mean, np.full_like(mean, 8.0), 50)


def test_overlap_matrix_has_labelled_axes_and_a_colour_bar():
    svg = overlap_figure(np.array([[0.9, 0.0, 0.1], [0.0, 0.5, 0.0]]), [3, 8], [1, 2, 7])
    words = texts(svg)
    assert {"imported unit", "fresh unit"} <= set(words)
    assert "overlap (Jaccard index)" in words
    assert {"3", "8", "1", "2", "7"} <= set(words)                        # unit ids as tick labels
    assert {"0.0", "0.2", "0.4", "0.6", "0.8", "1.0"} <= set(words)       # the colour bar's scale


def test_unit_figures_carry_units_on_their_axes():
    waves = texts(waveform_figure([(summary([4, 5, 6]), IMPORTED), (summary([5, 6, 9], 3.0), FRESH)]))
    assert {"channel 4", "channel 5", "channel 6", "time (ms)", "voltage (µV)"} <= set(waves)
    assert "channel 9" not in waves                 # only the first side's group is drawn
    edges = np.arange(0, 51.0)
    isi = texts(isi_figure([(np.arange(50.0), edges, IMPORTED)], 1.5))
    assert {"inter-spike interval (ms)", "count", "refractory period (1.5 ms)", "imported unit"} <= set(isi)
    amp = texts(amplitude_figure([(np.array([1.0, 2.0]), np.array([-80.0, -90.0]), IMPORTED),
                                  (np.array([1.5]), np.array([-85.0]), FRESH)], 10.0))
    assert {"time in recording (s)", "amplitude (µV)", "best fresh match", "10"} <= set(amp)


def test_ids_are_unique_across_figures_of_one_page():
    page = "".join(isi_figure([(np.arange(50.0), np.arange(0, 51.0), IMPORTED)], 1.5) for _ in range(3))
    root = ET.fromstring(f"<html>{page}</html>")
    ids = [e.get("id") for e in root.iter() if e.get("id")]
    assert ids and len(ids) == len(set(ids))


DRAW_BLOCKED = """
import sys
import tests.block_qt
import rigside.core.audit.html_report
assert "matplotlib" not in sys.modules, "importing the report must not import matplotlib"
import numpy as np
from rigside.core.audit.report_figures import overlap_figure
svg = overlap_figure(np.eye(2), [1, 2], [1, 2])
assert svg.startswith("<svg")
assert "matplotlib.pyplot" not in sys.modules
print("drawn")
"""


def test_figures_are_drawn_lazily_and_without_qt():
    r = subprocess.run([sys.executable, "-c", DRAW_BLOCKED], cwd=ROOT, capture_output=True, text=True)
    assert r.returncode == 0 and r.stdout.strip() == "drawn", r.stderr[-2000:]
