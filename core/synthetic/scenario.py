"""The ground truth of a synthetic recording: its units and every spike, before any voltage is made."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rigside.core.synthetic.settings import SynthSettings


@dataclass
class Unit:
    """One synthetic neuron."""

    unit: int
    group: int
    channels: np.ndarray      # the group's channels
    footprint: np.ndarray     # gain per channel of the group
    template: np.ndarray      # waveform in uV on the main channel (peak -amplitude)
    rate_hz: float
    kind: str                 # regular, bursting, drifting, look-alike
    amplitude_uv: float


@dataclass
class Scenario:
    """Units, spike times and the recording layout of one synthetic recording."""

    rate_hz: float
    n_samples: int
    n_channels: int
    groups: list[list[int]]
    units: list[Unit]
    spike_sample: np.ndarray   # trough sample of every spike (sorted)
    spike_unit: np.ndarray
    spike_scale: np.ndarray    # amplitude multiplier of every spike
    artefact_sample: np.ndarray
    seed: int
    settings: SynthSettings
