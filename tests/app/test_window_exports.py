"""File > Export in the window, driven through its real menus (file dialogs answered by the test):
the NWB file of the units, plots as PNG and SVG, and the numbers of the count curve and of the
quality histograms as CSV."""

from __future__ import annotations

import csv
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from PySide6.QtGui import QImage

from tests.app.units_helpers import cluster_demo, select_biggest_pair


def export_menu(win):
    file_menu = win.menuBar().actions()[0].menu()
    return next(a.menu() for a in file_menu.actions() if a.text() == "&Export")


def menu_action(menu, starts: str):
    menu.aboutToShow.emit()          # what opening the menu does: list the plots on screen
    texts = [a.text() for a in menu.actions()]
    return next(a for a in menu.actions() if a.text().startswith(starts)), texts


def rows_of(path):
    return list(csv.DictReader([ln for ln in path.read_text(encoding="utf-8").splitlines() if not ln.startswith("#")]))


def show_panel(panel) -> None:
    dock = panel.parentWidget()
    while dock is not None and not hasattr(dock, "toggleViewAction"):
        dock = dock.parentWidget()
    dock.show()
    dock.raise_()


def test_nwb_from_the_menu_passes_the_validator(demo_window, tmp_path):
    pynwb = pytest.importorskip("pynwb")   # the nwb extra
    win = demo_window
    assert not win.actions_by_name["export_nwb"].isEnabled()            # no units yet
    cluster_demo(win)
    assert win.actions_by_name["export_nwb"].isEnabled()
    assert not win.actions_by_name["export_nwb_copy"].isEnabled()       # the demo is raw binary, not NWB
    assert win.actions_by_name["export_nwb"] in export_menu(win).actions()
    out = tmp_path / "units.nwb"
    win.exporter.pick_file = lambda title, start, filt: str(out)
    win.actions_by_name["export_nwb"].trigger()
    assert win.wait_idle(120), win.last_error
    assert "NWB file written" in win.statusBar().currentMessage()
    assert pynwb.validate(path=str(out)) == []          # the standard's own check
    folder = tmp_path / "spikes"
    win.exporter.pick_folder = lambda title, start: str(folder)
    win.actions_by_name["export_spike_times"].trigger()
    assert win.wait_idle(60)
    rows = rows_of(folder / "unit_times.csv")
    with pynwb.NWBHDF5IO(str(out), "r") as io:
        units = io.read().units
        assert sorted(units.id[:]) == sorted(win.units.sorting.units)
        for i, u in enumerate(units.id[:]):
            csv_times = np.array([float(r["time_s"]) for r in rows if int(r["unit"]) == u])
            np.testing.assert_array_equal(units["spike_times"][i], csv_times)     # the CSV's numbers exactly


def test_an_nwb_file_is_never_written_onto_the_recording(demo_window, tmp_path):
    win = demo_window
    cluster_demo(win)
    link = tmp_path / "demo.nwb"
    link.symlink_to(win.bench.recording.path)
    before = link.read_bytes()
    win.exporter.pick_file = lambda title, start, filt: str(link)
    win.actions_by_name["export_nwb"].trigger()
    assert win.wait_idle(60)
    assert "must not be one of the inputs" in win.last_error[1] and link.read_bytes() == before


def test_plots_saved_as_png_and_svg(demo_window, tmp_path):
    win = demo_window
    curve = win.panels["count_curve"]
    show_panel(curve)
    assert win.wait_idle(60)
    menu = win.plot_image_menu
    action, texts = menu_action(menu, "Count versus threshold")
    assert any(t.startswith("Traces") for t in texts)
    png = tmp_path / "curve.png"
    win.exporter.pick_file = lambda title, start, filt: str(png)
    action.trigger()
    assert win.wait_idle(60)
    image = QImage(str(png))
    assert image.width() == 2 * curve.layout_widget.viewport().width()     # twice the size on screen
    assert image.height() > 2 * curve.layout_widget.viewport().height()   # with the caption (name, key) above
    colours = {image.pixel(x, y) for x in range(0, image.width(), 7) for y in range(0, image.height(), 7)}
    assert len(colours) > 3                                                  # a drawing, not a blank page
    svg = tmp_path / "curve.svg"
    win.exporter.pick_file = lambda title, start, filt: str(svg)
    menu_action(menu, "Count versus threshold")[0].trigger()
    assert win.wait_idle(60)
    root = ET.parse(svg).getroot()
    assert root.tag.endswith("svg")
    words = " ".join(t.text or "" for t in root.iter() if t.tag.endswith("text"))
    assert "threshold" in words and "events" in words                       # the axis labels are text
    # curves and axes kept as pixmaps for the screen (palette.painted_once) are saved as vectors
    assert not [e for e in root.iter() if e.tag.endswith("image")]
    assert curve.observed.curve.cacheMode() != curve.observed.curve.CacheMode.NoCache
    # the plot clicked last comes first
    win.traces.plot.setFocus()
    assert win.exporter.last_view is win.traces.plot
    _, texts = menu_action(menu, "Traces")
    assert texts[0].endswith("(last clicked)") and texts[0].startswith("Traces")


def test_count_curve_numbers_as_csv(demo_window, tmp_path):
    win = demo_window
    show_panel(win.panels["count_curve"])
    assert win.wait_idle(60)
    out = tmp_path / "curve.csv"
    win.exporter.pick_file = lambda title, start, filt: str(out)
    menu_action(win.plot_data_menu, "Count versus threshold")[0].trigger()
    assert win.wait_idle(60)
    rows = rows_of(out)
    assert len(rows) > 100
    ev, c = win.bench.events, win.bench.channel
    amps = ev.amplitude_sigma[(ev.channel == c) & ~ev.artefact]
    for r in rows[::17]:
        k = np.float32(float(r["threshold_sigma"]))
        # common practice, no source: events at or above the threshold, counted directly, per second
        expected = np.sum(amps >= k) / ev.duration_s
        assert float(r["events_per_s"]) == pytest.approx(expected, rel=1e-9)
        assert float(r["threshold_uv"]) == pytest.approx(float(r["threshold_sigma"]) * ev.sigma_uv[c], rel=1e-8)
    assert f"channel {c}" in out.read_text(encoding="utf-8").splitlines()[0]


def test_quality_histograms_as_csv(demo_window, tmp_path):
    win = demo_window
    cluster_demo(win)
    plots = win.unit_panels["plots"]
    show_panel(plots)
    pair = select_biggest_pair(win)
    out = tmp_path / "isi.csv"
    win.exporter.pick_file = lambda title, start, filt: str(out)
    action, texts = menu_action(win.plot_data_menu, "Unit quality plots: Inter-spike intervals")
    assert any("Correlograms" in t for t in texts) and not any(t.startswith("Traces") for t in texts)
    action.trigger()
    assert win.wait_idle(60)
    rows = rows_of(out)
    bin_ms, max_ms = plots.isi.bin_ms.value(), plots.isi.max_ms.value()
    s = win.units.sorting
    for u in pair:
        mine = [r for r in rows if r["histogram"] == "isi" and int(r["unit"]) == u]
        t = np.sort(s.data.time_s[s.events_of(u)])
        edges = np.array([float(r["bin_start_ms"]) for r in mine] + [float(mine[-1]["bin_end_ms"])])
        assert edges[-1] >= max_ms
        # reference: numpy.histogram of the intervals between consecutive spikes, the same bins
        expected, _ = np.histogram(np.diff(t) * 1e3, bins=np.arange(len(mine) + 1) * bin_ms)
        np.testing.assert_array_equal([int(r["count"]) for r in mine], expected)
    cross = tmp_path / "cross.csv"
    win.exporter.pick_file = lambda title, start, filt: str(cross)
    menu_action(win.plot_data_menu, "Unit quality plots: Correlograms (lag of B")[0].trigger()
    assert win.wait_idle(60)
    rows = rows_of(cross)
    assert {(int(r["unit"]), int(r["other_unit"])) for r in rows} == {tuple(pair)}
    assert sum(int(r["count"]) for r in rows) == int(plots.correlograms.cross_counts.sum())
