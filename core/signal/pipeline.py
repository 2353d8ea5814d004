"""The streaming runner: noise, then detection over chunks in parallel threads.

Recordings without site positions are detected group by group (:mod:`rigside.core.signal.detection`);
recordings with positions (probes) over overlapping neighbourhoods (:mod:`rigside.core.signal.probe_detection`).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TypeVar

import numpy as np

from rigside.core.errors import ParamError, RigsideError
from rigside.core.events import COLUMNS, POSITION_COLUMNS, EventColumns, EventTable, uv_to_sigma
from rigside.core.heap import give_back
from rigside.core.io.content import BackgroundHasher
from rigside.core.io.recording import Recording
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn, report, run_bounded
from rigside.core.signal.chunk_pool import chunk_bounds, chunk_samples
from rigside.core.signal.detection import detect_block
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.neighbourhoods import neighbourhoods
from rigside.core.signal.noise import NoiseEstimate, estimate_noise
from rigside.core.signal.overview import OverviewBuilder
from rigside.core.signal.probe_detection import POSITION_WINDOW_MS, detect_probe_block

R = TypeVar("R")

NOISE_SHARE = 0.1
"""Fraction of a detection's progress bar given to the noise estimate; :func:`detect` reports
from here to 1 whether it estimates the noise itself or is given it."""


def thresholds_sigma(params: Params, sigma_uv: np.ndarray) -> np.ndarray:
    """Per-channel detection threshold in sigma (inf on dead channels in microvolt mode); the stored
    per-channel thresholds (``detect.channel_thresholds_sigma``) when there are any."""
    d = params.detect
    if d.channel_thresholds_sigma is not None:
        if len(d.channel_thresholds_sigma) != len(sigma_uv):
            raise ParamError(f"per-channel thresholds must give one value per channel ({len(sigma_uv)}), "
                             f"got {len(d.channel_thresholds_sigma)}")
        return np.asarray(d.channel_thresholds_sigma, dtype=np.float64)
    if d.threshold_uv is None:
        return np.full(len(sigma_uv), d.threshold_sigma, dtype=np.float64)
    return uv_to_sigma(d.threshold_uv, sigma_uv)


def params_at_thresholds(params: Params, thresholds: np.ndarray, sigma_uv: np.ndarray | None) -> Params:
    """A copy of ``params`` detecting at per-channel thresholds, stated as one value for every channel.

    Parameters
    ----------
    params
        The parameters to copy (left unchanged).
    thresholds
        Threshold per channel, in sigma multiples (infinite on a dead channel).
    sigma_uv
        Noise sigma per channel in microvolts (None: not measured yet, only one sigma multiple will do).

    Returns
    -------
    Params
        The copy with ``detect.threshold_sigma`` set when every channel has the same finite multiple,
        else with ``detect.threshold_uv`` set when every live channel (sigma above zero) has the same
        microvolts, else with ``detect.channel_thresholds_sigma`` holding the thresholds (a dead
        channel, which holds no events, keeps the highest live threshold there: files hold finite numbers).

    Raises
    ------
    RigsideError
        When a live channel's threshold is not a finite number above 0.
    """
    out = Params.from_dict(params.to_dict())
    out.detect.channel_thresholds_sigma = None
    thr = np.asarray(thresholds, dtype=np.float64)
    if len(thr) and np.all(np.isfinite(thr)) and np.allclose(thr, thr[0]):
        out.detect.threshold_sigma, out.detect.threshold_uv = float(thr[0]), None
        return out
    sigma = np.ones(len(thr)) if sigma_uv is None else np.asarray(sigma_uv, dtype=np.float64)
    live = sigma > 0
    if len(thr) and live.any():
        uv = np.where(live & np.isfinite(thr), thr, 0.0) * sigma
        if sigma_uv is not None and np.all(np.isfinite(thr[live])) and np.allclose(uv[live], uv[live][0]):
            out.detect.threshold_uv = float(uv[live][0])
            return out
        if np.all(np.isfinite(thr[live]) & (thr[live] > 0)):
            out.detect.channel_thresholds_sigma = np.where(live, thr, thr[live].max()).tolist()
            out.detect.threshold_uv = None
            return out
    raise RigsideError(f"per-channel thresholds must be finite numbers above 0 sigma on live channels, got "
                       f"{thr[live].tolist()[:8] if len(thr) else 'none'}")


def lookup_floor(params: Params, sigma_uv: np.ndarray) -> float:
    """Lowest amplitude (sigma) stored: the given floor, or the lowest channel threshold."""
    thr = thresholds_sigma(params, sigma_uv)
    finite = thr[np.isfinite(thr)]
    lowest = float(finite.min()) if len(finite) else float(params.detect.threshold_sigma)
    floor = params.detect.floor_sigma
    return lowest if floor is None else min(float(floor), lowest)


@dataclass
class BlockDetector:
    """What detection of one block needs, fixed for a whole pass (built by :func:`block_detector`)."""

    recording: Recording
    bandpass: BandPass
    sigma: np.ndarray
    excluded: dict[int, str]
    floor: float
    params: Params

    def __post_init__(self) -> None:
        d, rate = self.params.detect, self.recording.rate_hz
        self.live_sigma = self.sigma.copy()
        self.live_sigma[list(self.excluded)] = 0.0  # a zero sigma keeps a channel out of detection
        self.dead = int(round(d.dead_time_ms * rate / 1000))
        self.art_w = int(round(d.artefact_window_ms * rate / 1000))
        self.half = int(round(POSITION_WINDOW_MS * rate / 1000))
        rec = self.recording
        # context each side of a block: the dead time, the artefact window and (probes) the position window
        self.margin = max(self.dead, self.art_w, self.half if rec.positions is not None else 0) + 2
        self.nbh = neighbourhoods(rec.positions, rec.shank, self.params.probe.radius_um) \
            if rec.positions is not None else None

    def events(self, y: np.ndarray, lo: int, start: int, stop: int) -> EventColumns:
        """Events peaking in ``[start, stop)`` of a filtered block ``y`` holding samples from ``lo``
        (with at least :attr:`margin` samples of context each side, except at the file's ends)."""
        rec, d = self.recording, self.params.detect
        if self.nbh is not None:
            return detect_probe_block(y, lo, start - lo, stop - lo, self.live_sigma, self.nbh, rec.positions,
                                      rec.channel_group, d.polarity, self.floor, self.dead, d.artefact_sigma,
                                      d.artefact_channel_fraction, self.art_w, self.half)
        return detect_block(y, lo, start - lo, stop - lo, self.live_sigma, rec.groups, d.polarity, self.floor,
                            self.dead, d.artefact_sigma, d.artefact_channel_fraction, self.art_w)

    def chunks(self) -> list[tuple[int, int]]:
        """The ``[start, stop)`` chunks of the pass (``params.run.chunk_s``, shorter on wide recordings:
        :func:`rigside.core.signal.chunk_pool.chunk_samples`)."""
        rec = self.recording
        return chunk_bounds(rec.n_samples, chunk_samples(self.params.run.chunk_s, rec.rate_hz, rec.n_channels,
                                                         4 * self.margin))

    def assemble(self, parts: list[EventColumns]) -> tuple[EventTable, np.ndarray | None]:
        """The event table of the chunks' events (given in file order), sorted by time, and the
        order that sorts their concatenation (``None`` when it is already sorted). Each column is
        joined and sorted on its own, so the table is never held twice."""
        rec = self.recording
        names = (*COLUMNS, *POSITION_COLUMNS) if rec.positions is not None else tuple(COLUMNS)

        def joined(name: str) -> np.ndarray:
            return np.concatenate([getattr(p, name) for p in parts]) if parts else np.empty(0)

        cols = {"sample": joined("sample"), "group": joined("group")}
        order = np.lexsort((cols["group"], cols["sample"]))
        if np.all(order[1:] > order[:-1]):
            order = None
        for name in names:
            v = cols[name] if name in cols else joined(name)
            cols[name] = v if order is None else v[order]
        table = EventTable(**cols, rate_hz=rec.rate_hz, n_samples=rec.n_samples, sigma_uv=self.sigma,
                           floor_sigma=self.floor, polarity=self.params.detect.polarity, excluded=self.excluded)
        return table, order


def block_detector(recording: Recording, params: Params, progress: ProgressFn = None, cancel: CancelFn = None,
                   noise: NoiseEstimate | None = None) -> BlockDetector:
    """Validate the parameters, measure the noise (unless given) and fix what detection of a block needs.

    Progress runs to :data:`NOISE_SHARE` (the noise estimate).
    """
    params.validate(recording.rate_hz)
    params.check_memory(recording.rate_hz, recording.n_channels)
    bp = BandPass(recording, params.filter)
    if noise is None:
        noise = estimate_noise(recording, params, cancel=cancel, bandpass=bp,
                               progress=lambda f, m: report(progress, f * NOISE_SHARE, m))
    sigma = np.asarray(noise.sigma_uv, dtype=np.float64)
    return BlockDetector(recording, bp, sigma, noise.excluded, lookup_floor(params, sigma), params)


GIVE_BACK_EVERY = 16
"""Chunks between two returns of free heap memory to the system (:mod:`rigside.core.heap`). Measured at
64 ch x 600 s: peak RSS of the one detection-and-features pass 554 MB against 628 MB never given back;
every 16 chunks rather than every 4 keeps that peak (516 against 512 MB) and makes the whole sort 5% faster
(each call walks the heap, 1.7 ms, on the thread that collects the chunks)."""


def stream_chunks(detector: BlockDetector, work: Callable[[int], R], items: list[int], on_result: Callable[[R], None],
                  progress: ProgressFn, cancel: CancelFn, message: str) -> None:
    """Run ``work(i)`` for the chunk indices ``items`` (two at a time per worker), hashing the whole file
    alongside (``recording.content_hash``); ``on_result`` gets each result in item order."""
    hasher = BackgroundHasher(detector.recording.path)
    done = [0]

    def collect(result: R) -> None:
        on_result(result)
        done[0] += 1
        if done[0] % GIVE_BACK_EVERY == 0:
            give_back()
        hasher.advance(done[0] / len(items))
        report(progress, NOISE_SHARE + (1 - NOISE_SHARE) * done[0] / len(items), message)

    with hasher:
        run_bounded(work, [(i,) for i in items], detector.params.run.workers, collect, cancel)
        detector.recording.content_hash = hasher.finish()


def detect(recording: Recording, params: Params, progress: ProgressFn = None, cancel: CancelFn = None,
           noise: NoiseEstimate | None = None, overview: OverviewBuilder | None = None) -> EventTable:
    """Measure noise (unless given) and detect events over the whole recording.

    Parameters
    ----------
    recording
        The recording, read in chunks of ``params.run.chunk_s``.
    params
        All parameters (validated here against the sampling rate).
    progress, cancel
        Progress callback and cancel check.
    noise
        A noise estimate to reuse; measured when not given.
    overview
        When given, every filtered chunk is also handed to it (see :mod:`core.overview`).

    Returns
    -------
    EventTable
        Every event down to the look-up floor (see :func:`lookup_floor`), sorted by time; on a
        recording with site positions, one event per spatio-temporal peak with its position.
        Channels flagged dead or saturated (``NoiseEstimate.excluded``) hold no events.
        ``EventTable.mask`` with the detection threshold selects the detected events.
        The pass also hashes the whole file (``recording.content_hash``) and raises
        :class:`rigside.core.errors.RecordingError` if the file changes size meanwhile.
    """
    det = block_detector(recording, params, progress, cancel, noise)
    bounds = det.chunks()

    def work(i: int) -> EventColumns:
        start, stop = bounds[i]
        lo, hi = max(0, start - det.margin), min(recording.n_samples, stop + det.margin)
        y = det.bandpass.read(lo, hi)
        if overview is not None:
            overview.add(y, lo, start, stop)
        return det.events(y, lo, start, stop)

    parts: list[EventColumns] = []
    stream_chunks(det, work, list(range(len(bounds))), parts.append, progress, cancel, "detecting")
    return det.assemble(parts)[0]
