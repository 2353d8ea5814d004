"""The probe map ("Sites"): every site at its place on the probe, the units' positions on top, and the first
selected unit's footprint (its mean waveform drawn small at each site of its neighbourhood).

Clicking a unit selects it in the unit list; clicking a site selects that channel in the traces (its group
shown if it was not). The footprint is cut in the ``footprint`` job (:func:`rigside.core.quality.footprint.
unit_footprint`); the panel only places what the core computed.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QLabel, QVBoxLayout

from rigside.core.quality.footprint import Footprint, unit_footprint
from rigside.core.units.sorting import pool_group
from rigside.gui import palette
from rigside.gui.panels.base import Panel
from rigside.gui.panels.traces import NICE

SITE_PX = 11                 # side of a site's square on screen
UNIT_PX, SELECTED_PX = 9, 15  # unit dots, unselected and selected
MAX_UNIT_NAMES = 80          # units are named beside their dots when there are at most this many
WAVE_WIDTH = 0.8             # a footprint waveform spans this share of the site pitch across
WAVE_HEIGHT = 2.0            # and its largest excursion this share of the pitch up or down
MARGIN_UM = 30.0             # room around the sites in the first view (µm), more to the right for the scale bar
MARGIN_RIGHT_UM = 50.0
SITE_FILL, SITE_EDGE = (225, 225, 225), (150, 150, 150)


class SitesPanel(Panel):
    panel_id = "sites"
    title = "Sites"

    def __init__(self, bench, runner, controller, parent=None):
        super().__init__(bench, runner, parent)
        self.ctl = controller
        self.footprint: Footprint | None = None
        self.unit_ids = np.zeros(0, dtype=np.int64)
        self.um_per_uv = 0.0          # vertical scale of the footprint drawn (µm of the plot per µV)
        self.plot = palette.make_plot("across the probe, x (µm)", "along the probe, y (µm)")
        pi = self.plot.getPlotItem()
        pi.setMenuEnabled(False)
        pi.hideButtons()
        self.sites = pg.ScatterPlotItem(symbol="s", size=SITE_PX, pen=pg.mkPen(SITE_EDGE), brush=pg.mkBrush(SITE_FILL),
                                        hoverable=True, tip=self._site_tip)
        self.chosen_site = pg.ScatterPlotItem(symbol="s", size=SITE_PX + 4, brush=pg.mkBrush(None),
                                              pen=palette.pen(palette.TRACE_SELECTED, 2.5))
        self.units = pg.ScatterPlotItem(pen=pg.mkPen(palette.FOREGROUND), hoverable=True,
                                        tip=self._unit_tip)
        self.waves = pg.PlotCurveItem(connect="finite", pen=palette.pen(palette.GREY, 2.0))
        self.bar = pg.PlotCurveItem(pen=palette.pen(palette.BLACK, 2.5))
        self.bar_text = pg.TextItem("", color=palette.FOREGROUND, anchor=(0, 0.5), fill=(255, 255, 255, 220))
        for item in (self.sites, self.chosen_site, self.waves, self.units, self.bar):
            pi.addItem(item)
        self.site_name = pg.TextItem("", color=palette.TRACE_SELECTED, anchor=(-0.25, 0.5))
        for text in (self.bar_text, self.site_name):
            pi.addItem(text, ignoreBounds=True)
        self.names: list[pg.TextItem] = []
        self.status = QLabel("")
        self.status.setWordWrap(True)
        self.setToolTip("The probe's sites (grey squares) at their positions; click one to select its trace. Dots: "
                        "units at their positions (selected ones larger, in their colour); click one to select it. "
                        "The first selected unit's mean waveform is drawn at each site of its neighbourhood, with a "
                        "scale bar in µV. Wheel: zoom; drag: move.")
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.plot, 1)
        lay.addWidget(self.status)
        self.sites.sigClicked.connect(self._on_site_clicked)
        self.units.sigClicked.connect(self._on_unit_clicked)
        bench.recording_changed.connect(self._on_recording)
        bench.selection_changed.connect(self._draw_chosen_site)
        controller.metrics_changed.connect(self._draw_units)
        controller.sorting_replaced.connect(self._on_units)
        controller.selection_changed.connect(self._on_units)
        controller.units_changed.connect(self._on_units_changed)

    # ---- sites ----------------------------------------------------------------------------
    def _site_tip(self, x: float, y: float, data) -> str:
        return f"ch {int(data)}: x {x:g}, y {y:g} µm"

    def _unit_tip(self, x: float, y: float, data) -> str:
        return f"{self.ctl.unit_name(int(data))}: x {x:.3g}, y {y:.3g} µm"

    def _on_recording(self) -> None:
        self._clear_footprint()
        rec = self.bench.recording
        if rec.positions is None:
            self.sites.clear()
            self.chosen_site.clear()
            self.status.setText("This recording has no site positions: there is no probe to draw.")
            return
        pos = rec.positions
        self.sites.setData(pos[:, 0], pos[:, 1], data=np.arange(rec.n_channels))
        self._draw_chosen_site()
        self._draw_units()
        (x0, y0), (x1, y1) = pos.min(axis=0), pos.max(axis=0)
        self.plot.getPlotItem().setRange(xRange=(x0 - MARGIN_UM, x1 + MARGIN_RIGHT_UM),
                                         yRange=(y0 - MARGIN_UM, y1 + MARGIN_UM), padding=0.0)

    def _draw_chosen_site(self) -> None:
        rec = self.bench.recording
        if rec is None or rec.positions is None:
            return
        x, y = rec.positions[self.bench.channel]
        self.chosen_site.setData([x], [y])
        self.site_name.setText(f"ch {self.bench.channel}")
        self.site_name.setPos(float(x), float(y))
        self._say()

    def _on_site_clicked(self, _item, points, *_: object) -> None:
        if len(points):
            self.go_to_site(int(points[0].data()))

    def go_to_site(self, channel: int) -> None:
        """Select ``channel`` in the traces, showing its group first when it is not shown."""
        b = self.bench
        if channel not in b.shown_channels:
            b.show_group(int(b.recording.channel_group[channel]))
        b.select_channel(channel)

    # ---- units ----------------------------------------------------------------------------
    def _on_units(self) -> None:
        self._draw_units()
        self._request_footprint()

    def _on_units_changed(self, change) -> None:
        if self.footprint is not None and self.footprint.unit in set(change.touched) | set(change.removed):
            self.footprint = None         # its events changed: cut it again
        self._on_units()

    def _probe_session(self) -> bool:
        """True when a sorting of the open probe recording is held (positions can be drawn)."""
        rec, s = self.bench.recording, self.ctl.session
        return (rec is not None and rec.positions is not None and s is not None
                and Path(rec.path).resolve() == Path(s.recording.path).resolve())

    def _draw_units(self) -> None:
        m = self.ctl.metrics
        shown = [u for u in sorted(m) if pool_group(u) is None and "y_um" in m[u]] if self._probe_session() else []
        self.unit_ids = np.array(shown, dtype=np.int64)
        pi = self.plot.getPlotItem()
        for t in self.names:
            pi.removeItem(t)
        self.names = []
        spots = []
        for u in shown:
            colour = self.ctl.unit_colour(u)
            spots.append({"pos": (float(m[u]["x_um"]), float(m[u]["y_um"])), "data": u,
                          "size": UNIT_PX if colour is None else SELECTED_PX,
                          "brush": pg.mkBrush(*(palette.GREY if colour is None else colour), 230)})
            if len(shown) <= MAX_UNIT_NAMES:
                name = pg.TextItem(str(u), color=palette.FOREGROUND if colour is None else colour, anchor=(1.3, 0.5))
                name.setPos(*spots[-1]["pos"])
                pi.addItem(name, ignoreBounds=True)
                self.names.append(name)
        self.units.setData(spots)
        self._say()

    def _on_unit_clicked(self, _item, points, *_: object) -> None:
        if len(points):
            self.ctl.set_selection([int(points[0].data())])

    def unit_screen_pos(self, unit: int):
        """Where unit ``unit`` is drawn, in the plot widget's coordinates (for tests and hints)."""
        m = self.ctl.metrics[unit]
        return self.to_widget(float(m["x_um"]), float(m["y_um"]))

    def to_widget(self, x_um: float, y_um: float):
        """A point of the probe (µm) in the plot widget's coordinates."""
        vb = self.plot.getPlotItem().getViewBox()
        return self.plot.mapFromScene(vb.mapViewToScene(pg.Point(x_um, y_um)))

    # ---- footprint ------------------------------------------------------------------------
    def _clear_footprint(self) -> None:
        self.footprint = None
        self.waves.setData([], [])
        self.bar.setData([], [])
        self.bar_text.setText("")

    def _request_footprint(self) -> None:
        units = [u for u in self.ctl.selection if pool_group(u) is None]
        if not units or not self._probe_session():
            self._clear_footprint()
            self._say()
            return
        s, u = self.ctl.session, units[0]
        if self.footprint is not None and self.footprint.unit == u and self.ctl.selection[0] == u:
            self._draw_footprint()        # the same unit: only its colour may have changed
            return
        self.status.setText(f"Cutting the mean waveform of {self.ctl.unit_name(u)}…")
        self.runner.submit("footprint", "Cutting a unit's footprint", unit_footprint, self.bench.recording,
                           s.events, s.params, s.sorting, u, on_done=self._on_footprint)

    def _on_footprint(self, fp: Footprint) -> None:
        if not self.ctl.selection or fp.unit not in self.ctl.selection or not self._probe_session():
            return
        self.footprint = fp
        self._draw_footprint()

    def _draw_footprint(self) -> None:
        fp, rec = self.footprint, self.bench.recording
        pos = rec.positions[fp.channels]
        gaps = np.hypot(*(pos[:, None, :] - pos[None, :, :]).transpose(2, 0, 1))
        pitch = float(gaps[gaps > 0].min()) if np.any(gaps > 0) else 20.0
        peak = float(np.abs(fp.mean_uv).max()) or 1.0
        um_per_uv = WAVE_HEIGHT * pitch / peak
        t = fp.times_ms
        across = (t - t[0]) / (t[-1] - t[0]) * WAVE_WIDTH * pitch - 0.5 * WAVE_WIDTH * pitch
        xs = (pos[:, 0][None, :] + across[:, None])
        ys = (pos[:, 1][None, :] + fp.mean_uv * um_per_uv)
        gap = np.full((1, len(fp.channels)), np.nan)
        self.waves.setData(np.vstack([xs, gap]).T.ravel(), np.vstack([ys, gap]).T.ravel())
        colour = self.ctl.unit_colour(fp.unit) or palette.GREY
        self.waves.setPen(palette.pen(colour, 2.0))
        uv = float(NICE[max(0, np.searchsorted(NICE, peak) - 1)])
        x = float(pos[:, 0].max()) + 0.8 * pitch
        y0 = float(pos[:, 1].min())
        self.bar.setData([x, x], [y0, y0 + uv * um_per_uv])
        self.bar_text.setText(f"{uv:g} µV")
        self.bar_text.setPos(x + 0.1 * pitch, y0 + 0.5 * uv * um_per_uv)
        self.um_per_uv = um_per_uv
        self._say()

    def _say(self) -> None:
        rec = self.bench.recording
        if rec is None or rec.positions is None:
            return
        c = self.bench.channel
        x, y = rec.positions[c]
        text = f"ch {c} (outlined): x {x:g}, y {y:g} µm."
        fp = self.footprint
        if fp is not None:
            span = fp.times_ms[-1] - fp.times_ms[0]
            text += (f" {self.ctl.unit_name(fp.unit)}: mean of {fp.n_events} events, {len(fp.channels)} sites around "
                     f"ch {fp.peak_channel}, {span:.2g} ms each.")
        self.status.setText(text)
