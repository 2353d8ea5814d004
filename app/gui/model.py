"""Qt-free state of the workbench: what is loaded, what is shown, the threshold.

Views subscribe to :class:`Signal` attributes of :class:`Workbench`; a signal holds weak
references to bound methods, so a closed panel never keeps itself alive through the model.
Thresholds are stored per channel in sigma multiples; the scale (sigma or microvolts) and
the scope (all channels or one) only say how the next edit is read and how values are shown.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from rigside.core.events import uv_to_sigma
from rigside.core.io.positions import site_order
from rigside.core.notify import Signal
from rigside.core.signal.neighbourhoods import neighbourhoods
from rigside.core.signal.rice import sampled_crossing_rate

if TYPE_CHECKING:   # the types of Analysis only: no import at run time
    from rigside.core.events import EventTable
    from rigside.core.io.recording import Recording
    from rigside.core.params import Params
    from rigside.core.signal.features import Features
    from rigside.core.signal.neighbourhoods import Neighbourhoods
    from rigside.core.signal.noise import NoiseEstimate
    from rigside.core.signal.overview import Overview
    from rigside.core.synthetic.truth import Truth

SCALES = ("sigma", "uv")
SCOPES = ("all", "channel", "neighbourhood")


@dataclass
class Analysis:
    """Results of the long work for one recording (any may still be missing)."""

    recording: Recording | None = None
    params: Params | None = None
    noise: NoiseEstimate | None = None
    events: EventTable | None = None
    features: Features | None = None
    truth: Truth | None = None
    sos: np.ndarray | None = None
    overview: Overview | None = None        # of the filtered signal, once one exists
    neighbours: Neighbourhoods | None = None  # of the probe's sites, found on first use
    noise_grid: tuple[np.ndarray, np.ndarray] | None = None


def noise_rate_grid(sos: np.ndarray, rate_hz: float, polarity: str) -> tuple[np.ndarray, np.ndarray]:
    """Thresholds (sigma) and log expected noise-only event rates, for interpolation."""
    ks = np.linspace(0.25, 12.0, 471)
    rate = sampled_crossing_rate(sos, rate_hz, ks) * (2.0 if polarity == "both" else 1.0)
    rate = np.maximum(rate, 1e-300)
    return ks, np.log(rate)


class Workbench:
    """The view state shared by every panel.

    Signals: ``recording_changed()``, ``events_changed()``, ``features_changed()``,
    ``truth_changed()`` (also when ground truth is hidden or revealed), ``selection_changed()``,
    ``thresholds_changed(final: bool)``
    (``final`` is False while a handle is being dragged), ``scale_changed()`` (the threshold scale or scope
    changed), ``view_changed(t0, t1)``, ``show_raw_changed()``, ``overview_changed()``.
    """

    def __init__(self) -> None:
        self.analysis = Analysis()
        self.recording_changed = Signal()
        self.events_changed = Signal()
        self.features_changed = Signal()
        self.truth_changed = Signal()
        self.selection_changed = Signal()
        self.thresholds_changed = Signal()
        self.scale_changed = Signal()
        self.view_changed = Signal()
        self.show_raw_changed = Signal()
        self.overview_changed = Signal()
        self.shown_channels = np.zeros(0, dtype=np.int64)
        self.shown_label = ""
        self.group = 0
        self.channel = 0
        self.thresholds_sigma = np.zeros(0)
        self.scale = "sigma"
        self.scope = "all"
        self.show_raw = False
        self.truth_hidden = False
        self.view = (0.0, 1.0)

    # ---- loading ------------------------------------------------------------------
    @property
    def recording(self) -> Recording | None:
        return self.analysis.recording

    @property
    def events(self) -> EventTable | None:
        return self.analysis.events

    def set_recording(self, recording: Recording, params: Params, sos: np.ndarray,
                      overview: Overview | None = None) -> None:
        """A new recording (with its cached overview, if any): forget results, show its first group."""
        if self.analysis.overview is not None:
            self.analysis.overview.close()
        self.analysis = Analysis(recording=recording, params=params, sos=sos, overview=overview)
        default = params.detect.threshold_sigma
        self.thresholds_sigma = np.full(recording.n_channels, float(default))
        self.view = (0.0, min(1.0, recording.duration_s))
        self.group = 0
        self.shown_channels = self.in_lane_order(recording.groups[0])
        self.shown_label = recording.group_names[0]
        self.channel = int(self.shown_channels[0])
        self.recording_changed.emit()
        self.selection_changed.emit()

    @property
    def overview(self) -> Overview | None:
        return self.analysis.overview

    def set_overview(self, overview: Overview | None) -> None:
        """Draw zoomed-out traces from this overview (None: from samples only)."""
        if self.analysis.overview is not None and self.analysis.overview is not overview:
            self.analysis.overview.close()
        self.analysis.overview = overview
        self.overview_changed.emit()

    def set_events(self, noise: NoiseEstimate, events: EventTable) -> None:
        self.analysis.noise = noise
        self.analysis.events = events
        self.analysis.noise_grid = noise_rate_grid(self.analysis.sos, self.recording.rate_hz,
                                                             events.polarity)
        self.analysis.features = None
        self.events_changed.emit()
        self.thresholds_changed.emit(True)

    def set_features(self, features: Features) -> None:
        self.analysis.features = features
        self.features_changed.emit()

    def set_truth(self, truth: Truth) -> None:
        self.analysis.truth = truth
        self.truth_changed.emit()

    @property
    def shown_truth(self) -> Truth | None:
        """The ground truth the views may show: None while it is hidden (the newcomer guesses first)."""
        return None if self.truth_hidden else self.analysis.truth

    def set_truth_hidden(self, hidden: bool) -> None:
        if bool(hidden) != self.truth_hidden:
            self.truth_hidden = bool(hidden)
            self.truth_changed.emit()

    # ---- selection ----------------------------------------------------------------
    def show_group(self, index: int) -> None:
        rec = self.recording
        if rec is None:
            return
        index = int(index) % len(rec.groups)
        self.group = index
        self.shown_channels = self.in_lane_order(rec.groups[index])
        self.shown_label = rec.group_names[index]
        self.channel = int(self.shown_channels[0])
        self.selection_changed.emit()

    def show_channels(self, channels, label: str) -> None:
        """Show a chosen set of channels (the group of the first becomes current)."""
        rec = self.recording
        chans = np.asarray(sorted(set(int(c) for c in channels)), dtype=np.int64)
        if rec is None or len(chans) == 0:
            return
        chans = self.in_lane_order(chans)
        self.shown_channels = chans
        self.shown_label = label
        self.channel = int(chans[0])
        self.group = int(rec.channel_group[self.channel])
        self.selection_changed.emit()

    def in_lane_order(self, channels) -> np.ndarray:
        """Channels in the order the traces stack them: on a probe as the sites lie on it (by shank,
        largest ``y_um`` at the top, the tip at the bottom; :func:`site_order`), else as given."""
        rec = self.recording
        if rec is None or rec.positions is None:
            return np.asarray(channels, dtype=np.int64)
        return site_order(channels, rec.positions, rec.shank)

    def select_channel(self, channel: int) -> None:
        channel = int(channel)
        if channel == self.channel or self.recording is None:
            return
        self.channel = channel
        if channel not in self.shown_channels:
            self.group = int(self.recording.channel_group[channel])
        self.selection_changed.emit()

    def step_channel(self, step: int) -> None:
        chans = list(self.shown_channels)
        if not chans:
            return
        i = chans.index(self.channel) if self.channel in chans else 0
        self.select_channel(chans[(i + step) % len(chans)])

    @property
    def group_channels(self) -> np.ndarray:
        rec = self.recording
        if rec is None:
            return np.zeros(0, dtype=np.int64)
        return np.asarray(rec.groups[int(rec.channel_group[self.channel])], dtype=np.int64)

    # ---- threshold ----------------------------------------------------------------
    @property
    def sigma_uv(self) -> np.ndarray | None:
        ev = self.events
        if ev is not None:
            return ev.sigma_uv
        noise = self.analysis.noise
        return None if noise is None else np.asarray(noise.sigma_uv)

    def set_scale(self, scale: str) -> None:
        """Read and show thresholds as sigma multiples ("sigma") or in microvolts ("uv")."""
        if scale not in SCALES:
            raise ValueError(f"threshold scale must be one of {', '.join(SCALES)}, got {scale!r}")
        if scale != self.scale:
            self.scale = scale
            self.scale_changed.emit()

    def set_scope(self, scope: str) -> None:
        if scope not in SCOPES:
            raise ValueError(f"threshold scope must be one of {', '.join(SCOPES)}, got {scope!r}")
        if scope != self.scope:
            self.scope = scope
            self.scale_changed.emit()

    def threshold_value(self, channel: int | None = None) -> float:
        """The threshold of a channel (default: the selected one) in the current scale."""
        c = self.channel if channel is None else int(channel)
        if c >= len(self.thresholds_sigma):
            return float("nan")
        k = float(self.thresholds_sigma[c])
        if self.scale == "sigma":
            return k
        sigma = self.sigma_uv
        return float("nan") if sigma is None else k * float(sigma[c])

    def neighbourhood(self, channel: int | None = None) -> np.ndarray:
        """The sites of the probe within ``probe.radius_um`` of a site (default: the selected one), itself
        included; on a recording without positions, only the channel."""
        c = self.channel if channel is None else int(channel)
        rec, a = self.recording, self.analysis
        if rec is None or rec.positions is None:
            return np.array([c], dtype=np.int64)
        if a.neighbours is None:
            a.neighbours = neighbourhoods(rec.positions, rec.shank, a.params.probe.radius_um)
        return a.neighbours.of(c)

    def set_threshold(self, value: float, final: bool = True, scale: str | None = None) -> None:
        """Set the threshold from a value in ``scale`` (default: the current scale).

        With scope "all", every channel gets the value (the same sigma multiple, or the
        same microvolts); with scope "channel", only the selected channel changes; with scope
        "neighbourhood", the selected site and its neighbours on the probe (:meth:`neighbourhood`).
        """
        scale = scale or self.scale
        value = float(value)
        if not np.isfinite(value) or value <= 0:
            return
        new = self.thresholds_sigma.copy()
        targets = {"all": np.arange(len(new)), "channel": np.array([self.channel])}.get(self.scope)
        if targets is None:
            targets = self.neighbourhood()
        if scale == "sigma":
            new[targets] = value
        else:
            sigma = self.sigma_uv
            if sigma is None:
                return
            new[targets] = uv_to_sigma(value, np.asarray(sigma, dtype=np.float64)[targets])
        changed = not np.array_equal(new, self.thresholds_sigma)
        self.thresholds_sigma = new
        if changed or final:
            self.thresholds_changed.emit(bool(final))

    def step_threshold(self, factor_steps: int) -> None:
        """Raise (positive) or lower the selected threshold by steps of 0.1 sigma or 1 uV."""
        step = 0.1 if self.scale == "sigma" else 1.0
        self.set_threshold(round(self.threshold_value() + step * factor_steps, 6), final=True)

    def noise_rates(self, k_sigma) -> np.ndarray:
        """Expected noise-only events per second at ``k_sigma`` (per channel or any array).

        Interpolated (in log rate) from the sampled-data crossing rate computed once for the
        recording's filter; doubled when both polarities are detected.
        """
        grid = self.analysis.noise_grid
        k = np.asarray(k_sigma, dtype=np.float64)
        if grid is None:
            return np.full(k.shape, np.nan)
        ks, log_rate = grid
        out = np.exp(np.interp(np.where(np.isfinite(k), k, ks[-1]), ks, log_rate))
        return np.where(np.isfinite(k), out, 0.0)

    def mask(self) -> np.ndarray | None:
        """Events at the current thresholds (artefacts excluded), or None."""
        ev = self.events
        return None if ev is None else ev.mask(threshold_sigma=self.thresholds_sigma)

    def counts(self) -> np.ndarray | None:
        ev = self.events
        return None if ev is None else ev.counts(threshold_sigma=self.thresholds_sigma)

    def below_floor(self) -> bool:
        """True when some live threshold is below the events' look-up floor."""
        ev = self.events
        if ev is None:
            return False
        finite = self.thresholds_sigma[np.isfinite(self.thresholds_sigma)]
        return bool(len(finite)) and float(finite.min()) < ev.floor_sigma - 1e-9

    # ---- view ---------------------------------------------------------------------
    def set_view(self, t0: float, t1: float) -> None:
        if (t0, t1) != self.view:
            self.view = (float(t0), float(t1))
            self.view_changed.emit(self.view[0], self.view[1])

    def set_show_raw(self, raw: bool) -> None:
        if bool(raw) != self.show_raw:
            self.show_raw = bool(raw)
            self.show_raw_changed.emit()
