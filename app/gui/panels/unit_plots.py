"""The quality plots of the selected units in one dock: ISI, correlograms, amplitude, waveforms."""

from __future__ import annotations

from PySide6.QtWidgets import QGridLayout

from rigside.gui.panels.base import Panel
from rigside.gui.panels.unit_amplitude import AmplitudeView
from rigside.gui.panels.unit_correlograms import CorrelogramView
from rigside.gui.panels.unit_isi import IsiView
from rigside.gui.panels.unit_waveforms import UnitWaveformView


class UnitPlotsPanel(Panel):
    panel_id = "unit_plots"
    title = "Unit quality plots"

    def __init__(self, bench, runner, controller, parent=None):
        super().__init__(bench, runner, parent)
        self.isi = IsiView(controller)
        self.correlograms = CorrelogramView(controller)
        self.amplitude = AmplitudeView(controller)
        self.waveforms = UnitWaveformView(controller)
        grid = QGridLayout(self)
        grid.setContentsMargins(2, 2, 2, 2)
        grid.addWidget(self.isi, 0, 0)
        grid.addWidget(self.correlograms, 0, 1)
        grid.addWidget(self.amplitude, 1, 0)
        grid.addWidget(self.waveforms, 1, 1)
        grid.setColumnStretch(0, 2)
        grid.setColumnStretch(1, 3)

    @property
    def views(self):
        return (self.isi, self.correlograms, self.amplitude, self.waveforms)
