"""The same quality numbers for imported units as for curated units.

The event set of the metrics is, per channel group, the imported spikes (on their unit's main
channel, at the imported times) plus the re-detected events no imported unit claims, which
count as events outside every unit. Amplitudes are the band-passed values on the main channel
at the imported times, gathered in one streaming pass over the recording.

Isolation distance and L-ratio need features of one PCA space per group
(:func:`rigside.core.signal.features.compute_features`). When a group holds more than ``separation_events``
events, they are computed on the events inside evenly spread time windows holding about that
many; a uniform sample of events leaves both measures unchanged in expectation (the unit's
share of the events and the distance quantile stay the same), and windows keep the raw-data
reads contiguous.
"""

from __future__ import annotations

import numpy as np

from rigside.core.audit.imported import Placement, to_samples
from rigside.core.events import EventTable
from rigside.core.io.recording import Recording
from rigside.core.io.spike_import import SpikeTrains
from rigside.core.params import MetricParams, Params
from rigside.core.progress import CancelFn, ProgressFn, report, run_bounded
from rigside.core.quality.unit_table import unit_metrics_for_events, unit_metrics_table
from rigside.core.signal.features import compute_features
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.pipeline import chunk_bounds, thresholds_sigma
from rigside.core.units.sorting import NO_UNIT

SEPARATION_EVENTS = 10_000
"""Most events per group used for isolation distance and L-ratio (see the module docstring)."""
N_WINDOWS = 40
SEPARATION_COLUMNS = ("isolation_distance", "isolation_distance_reason", "l_ratio", "l_ratio_reason")


def metric_thresholds(params: Params, sigma_uv: np.ndarray) -> np.ndarray:
    """Per-channel detection threshold (sigma) for the metrics; dead channels (infinite
    threshold in microvolt mode) get the largest float, as they hold no events."""
    thr = thresholds_sigma(params, sigma_uv)
    return np.where(np.isfinite(thr), thr, np.finfo(np.float64).max)


def values_at(bandpass: BandPass, samples: np.ndarray, channels: np.ndarray, chunk: int, workers: int,
              progress: ProgressFn = None, cancel: CancelFn = None) -> np.ndarray:
    """Band-passed value (uV) at each ``(samples[i], channels[i])``, in one streaming pass.

    ``samples`` must be sorted. Chunks of ``chunk`` samples are filtered in ``workers``
    threads; only the span holding spikes and the channels they need are read.
    """
    rec = bandpass.recording
    out = np.empty(len(samples), dtype=np.float64)
    bounds = chunk_bounds(rec.n_samples, chunk)
    edges = np.searchsorted(samples, [b[0] for b in bounds] + [rec.n_samples])

    def work(k: int) -> None:
        a, b = edges[k], edges[k + 1]
        if a == b:
            return
        chans = np.unique(channels[a:b])
        every = len(chans) == rec.n_channels
        y = bandpass.read(int(samples[a]), int(samples[b - 1]) + 1, None if every else chans)
        out[a:b] = y[samples[a:b] - samples[a], np.searchsorted(chans, channels[a:b])]

    done = [0]

    def advance(_: None) -> None:
        done[0] += 1
        report(progress, done[0] / len(bounds), "reading amplitudes")

    run_bounded(work, ((k,) for k in range(len(bounds))), workers, advance, cancel)
    report(progress, 1.0, "reading amplitudes")
    return out


def window_mask(samples: np.ndarray, groups: np.ndarray, n_samples: int, most: int) -> np.ndarray:
    """Events inside :data:`N_WINDOWS` evenly spread windows holding about ``most`` events of
    the fullest group (every event when no group holds more)."""
    fullest = int(np.bincount(groups).max()) if len(groups) else 0
    if fullest <= most:
        return np.ones(len(samples), dtype=bool)
    width = n_samples * most / fullest / N_WINDOWS
    starts = (np.arange(N_WINDOWS) + 0.5) * n_samples / N_WINDOWS - width / 2
    k = np.minimum((samples * N_WINDOWS) // n_samples, N_WINDOWS - 1)
    return (samples >= starts[k]) & (samples < starts[k] + width)


def imported_quality(recording: Recording, params: Params, spikes: SpikeTrains,
                     placements: dict[int, Placement], events: EventTable, free: np.ndarray,
                     metric_params: MetricParams | None = None, progress: ProgressFn = None,
                     cancel: CancelFn = None,
                     separation_events: int = SEPARATION_EVENTS,
                     matched: np.ndarray | None = None) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Quality table of the imported units and the amplitude of every imported spike.

    Parameters
    ----------
    recording, params
        Raw data and pipeline parameters.
    spikes
        Imported trains; ``placements`` from :func:`rigside.core.audit.imported.place_units`.
    events
        Re-detected events (their amplitudes, noise sigma and table context are used).
    free
        Indices of re-detected events no imported unit claims.
    metric_params
        Settings of the quality metrics.
    separation_events
        Most events per group for isolation distance and L-ratio.
    matched
        On a probe, the event each imported spike is matched to (-1: none; order of ``spikes``): it
        takes that event's position, else its main site's; the table then has the position columns.

    Returns
    -------
    table, amplitude_uv
        Columns of :data:`rigside.core.quality.unit_table.COLUMNS`, one row per imported unit (ascending id),
        and the band-passed value on the unit's main channel at each imported spike (uV, in
        the order of ``spikes``).
    """
    ids, starts = spikes.bounds()
    code = np.repeat(np.arange(len(ids)), np.diff(starts))      # imported ids may be any integer
    main = np.array([placements[int(u)].main_channel for u in ids], dtype=np.int64)
    group = np.array([placements[int(u)].group for u in ids], dtype=np.int64)
    free = np.asarray(free, dtype=np.int64)
    free = free[np.isin(events.group[free], group)]
    imp_samples = to_samples(spikes.times_s, recording.rate_hz, recording.n_samples)
    by_time = np.argsort(imp_samples, kind="stable")
    bp = BandPass(recording, params.filter)
    amp_imp = np.empty(len(spikes))
    amp_imp[by_time] = values_at(bp, imp_samples[by_time], main[code][by_time],
                                 max(int(params.run.chunk_s * recording.rate_hz), 1), params.run.workers,
                                 lambda f, m: report(progress, 0.4 * f, m), cancel)
    sample = np.concatenate([imp_samples, events.sample[free]])
    order = np.argsort(sample, kind="stable")
    channel = np.concatenate([main[code], events.channel[free]])[order]
    grp = np.concatenate([group[code], events.group[free]])[order]
    unit = np.concatenate([code, np.full(len(free), NO_UNIT)])[order]
    amp = np.concatenate([amp_imp, events.amplitude_uv[free]])[order]
    sample = sample[order]
    sigma = events.sigma_uv[channel]
    amp_sigma = np.where(sigma > 0, np.abs(amp) / np.where(sigma > 0, sigma, 1.0), 0.0)
    thr = metric_thresholds(params, events.sigma_uv)
    where = _positions(recording, events, main[code], free, matched)
    rows = unit_metrics_table(sample / recording.rate_hz, unit, recording.duration_s, amp, amp_sigma, channel,
                              events.sigma_uv, thr, None, grp, metric_params, cancel=cancel,
                              progress=lambda f, m: report(progress, 0.4 + 0.2 * f, m),
                              event_positions=None if where is None else where[order])
    keep = window_mask(sample, grp, recording.n_samples, separation_events)
    sub = EventTable(sample[keep], channel[keep], grp[keep], amp[keep], amp_sigma[keep],
                     np.zeros(int(keep.sum()), bool), rate_hz=recording.rate_hz, n_samples=recording.n_samples,
                     sigma_uv=events.sigma_uv, floor_sigma=events.floor_sigma, polarity=events.polarity)
    feats = compute_features(recording, sub, params, cancel=cancel,
                             progress=lambda f, m: report(progress, 0.6 + 0.35 * f, m))
    sep = unit_metrics_for_events(sub, unit[keep], feats, thr, metric_params, cancel=cancel)
    at = np.searchsorted(rows["unit"], sep["unit"])
    for c in SEPARATION_COLUMNS:
        if c.endswith("_reason"):
            rows[c] = np.full(len(rows["unit"]), "no spikes in the time windows sampled for separation",
                              dtype=object)
            rows[c][at] = sep[c].astype(object)
        else:
            rows[c][:] = np.nan
            rows[c][at] = sep[c]
    rows["unit"] = ids[rows["unit"]]
    report(progress, 1.0, "quality numbers")
    return rows, amp_imp


def _positions(recording: Recording, events: EventTable, main: np.ndarray, free: np.ndarray,
               matched: np.ndarray | None) -> np.ndarray | None:
    """Position (x_um, y_um) of every imported spike (its matched event's, else its main site's)
    followed by the free events' own; None off a probe."""
    if events.x_um is None or recording.positions is None or matched is None:
        return None
    own = np.column_stack([events.x_um, events.y_um]).astype(np.float64)
    imp = recording.positions[main].astype(np.float64)
    hit = matched >= 0
    imp[hit] = own[matched[hit]]
    return np.vstack([imp, own[free]])
