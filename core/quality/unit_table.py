"""The per-unit quality table: one row per unit id, one column per metric (unit in the name).

The table is a dict of equal-length column arrays, rows sorted by unit id. Metrics that are
undefined for a unit are NaN, with the reason in the matching ``*_reason`` column.
:data:`COLUMNS` describes every column; recordings with site positions add the columns of
:data:`~rigside.core.quality.unit_position.POSITION_COLUMNS` (position and drift), absent otherwise
(:func:`described_columns` lists those of a table); :mod:`rigside.core.quality.unit_table_io`
writes the table to CSV and flags units against limits.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numba
import numpy as np

from rigside.core.errors import ParamError, RigsideError
from rigside.core.params import MetricParams
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.quality.caution import CAUTION  # noqa: F401 (re-exported)
from rigside.core.quality.metric_inputs import positive, same_length, spike_times
from rigside.core.quality.metrics import amplitude_drift, cv_isi, isi_violations, missed_fraction, presence_ratio, snr
from rigside.core.quality.separation import separation_of_checked
from rigside.core.quality.unit_position import POSITION_COLUMNS, position_drift, unit_position
from rigside.core.units.sorting import NO_UNIT

if TYPE_CHECKING:  # annotations only: importing features would load scikit-learn
    from rigside.core.events import EventTable
    from rigside.core.signal.features import Features


COLUMNS: dict[str, str] = {
    "unit": "unit id",
    "group": "channel group whose events the unit is compared with (most of its events lie there)",
    "main_channel": "channel on which most of the unit's events were detected",
    "n_events": "number of events [count]",
    "rate_hz": "mean firing rate over the recording [Hz]",
    "cv_isi": "coefficient of variation of inter-spike intervals [ratio]",
    "cv_isi_reason": "why cv_isi is undefined",
    "isi_violations": "intervals between consecutive spikes in [censored, refractory) [count]",
    "contamination": "contaminating fraction, Hill et al. 2011, from one other refractory "
                     "neuron [fraction]",
    "contamination_reason": "why contamination is undefined",
    "contamination_poisson": "contaminating fraction if the contaminating spikes are random "
                             "(Poisson) [fraction]",
    "contamination_poisson_reason": "why contamination_poisson is undefined",
    "isolation_distance": "isolation distance, Harris et al. 2001 [squared Mahalanobis distance]",
    "isolation_distance_reason": "why isolation_distance is undefined",
    "l_ratio": "L-ratio, Schmitzer-Torbert et al. 2005 [ratio]",
    "l_ratio_reason": "why l_ratio is undefined",
    "snr": "mean |peak| on the main channel / that channel's robust noise sigma [ratio]",
    "snr_reason": "why snr is undefined",
    "missed_fraction": "spikes estimated lost below threshold, cut-Gaussian fit of main-channel "
                       "amplitudes [fraction]",
    "missed_fraction_reason": "why missed_fraction is undefined",
    "presence_ratio": "time bins holding at least one spike [fraction]",
    "amplitude_slope_uv_per_min": "least-squares slope of main-channel amplitude [uV/min]",
    "amplitude_change_fraction": "change of amplitude magnitude over the session / mean [fraction]",
    "amplitude_drift_reason": "why the amplitude drift is undefined",
}
INT_COLUMNS = frozenset({"unit", "group", "main_channel", "n_events", "isi_violations"})


def described_columns(table: dict) -> dict[str, str]:
    """The described columns ``table`` holds, in order: :data:`COLUMNS`, then the position columns
    when it has them."""
    return COLUMNS | (POSITION_COLUMNS if all(c in table for c in POSITION_COLUMNS) else {})


def _int_column(x, name: str, n: int) -> np.ndarray:
    a = np.asarray(x)
    if a.ndim != 1 or not np.issubdtype(a.dtype, np.integer):
        raise RigsideError(f"{name} must be a 1-D integer array, got dtype {a.dtype} and shape {a.shape}")
    same_length(n, **{name: a})
    return a


def _float_column(x, name: str, n: int) -> np.ndarray:
    a = np.asarray(x)
    if a.ndim != 1 or not np.all(np.isfinite(a)):
        raise RigsideError(f"{name} must be a 1-D array of finite numbers, got shape {a.shape}")
    same_length(n, **{name: a})
    return a


class _Inputs:
    """The checked event columns of one table computation."""

    def __init__(self, times_s, units, duration_s, amplitudes_uv, amplitude_sigma, channel, sigma_uv,
                 threshold_sigma, features, groups, positions=None):
        self.duration = positive("recording duration", duration_s)
        self.times = spike_times(times_s, self.duration, name="event times")
        n = len(self.times)
        self.units = _int_column(units, "unit ids", n)
        self.channel = _int_column(channel, "event channels", n)
        self.amp_uv = _float_column(amplitudes_uv, "amplitudes", n)
        self.amp_sigma = _float_column(amplitude_sigma, "amplitudes in sigma", n)
        self.sigma_uv = np.asarray(sigma_uv, dtype=np.float64).ravel()
        if not np.all(np.isfinite(self.sigma_uv)) or np.any(self.sigma_uv < 0):
            raise RigsideError(f"channel noise sigmas must be finite and at least 0 uV, got {self.sigma_uv}")
        if n and (self.channel.min() < 0 or self.channel.max() >= len(self.sigma_uv)):
            raise RigsideError(f"event channels must lie in 0..{len(self.sigma_uv) - 1}, got "
                               f"{self.channel.min()}..{self.channel.max()}")
        thr = np.asarray(threshold_sigma, dtype=np.float64)
        if thr.ndim > 1 or (thr.ndim == 1 and len(thr) != len(self.sigma_uv)) \
                or not np.all(np.isfinite(thr)) or np.any(thr <= 0):
            raise ParamError(f"threshold must be one positive number of sigma or one per channel "
                             f"({len(self.sigma_uv)}), got {threshold_sigma!r}")
        self.threshold = np.broadcast_to(thr, self.sigma_uv.shape)
        self.groups = (np.zeros(n, dtype=np.int64) if groups is None
                       else _int_column(groups, "event groups", n))
        self.features = None
        if features is not None:
            f = np.asarray(features)
            if f.ndim == 1:
                f = f[:, None]
            if f.ndim != 2 or len(f) != n:
                raise RigsideError(f"features must be events x features with {n} rows, got shape {f.shape}")
            if not np.all(np.isfinite(f)):
                raise RigsideError("features must hold finite numbers, got NaN or infinite values")
            self.features = f
        self.positions = None
        if positions is not None:
            p = np.asarray(positions, dtype=np.float64)
            if p.shape != (n, 2) or not np.all(np.isfinite(p)):
                raise RigsideError(f"event positions must be events x 2 (x_um, y_um) finite numbers with {n} rows, "
                                   f"got shape {p.shape}")
            self.positions = p


@numba.njit(cache=True, nogil=True)
def _counting_order(codes, n_codes):
    """Stable order of the events by code (a counting sort): indices of code 0 first, ..."""
    starts = np.zeros(n_codes + 1, dtype=np.int64)
    for c in codes:
        starts[c + 1] += 1
    for c in range(n_codes):
        starts[c + 1] += starts[c]
    fill = starts[:-1].copy()
    order = np.empty(len(codes), dtype=np.int64)
    for i in range(len(codes)):
        order[fill[codes[i]]] = i
        fill[codes[i]] += 1
    return order, starts


def _split_by_key(keys: np.ndarray) -> tuple[np.ndarray, list[np.ndarray]]:
    """Distinct keys (sorted) and the ascending event indices holding each."""
    ids = np.unique(keys)
    if len(ids) and int(ids[-1]) - int(ids[0]) <= 4 * len(keys):   # small id range: a look-up table
        table = np.zeros(int(ids[-1]) - int(ids[0]) + 1, dtype=np.int64)
        table[ids - ids[0]] = np.arange(len(ids))
        codes = table[keys - ids[0]]
    else:
        codes = np.searchsorted(ids, keys)
    order, starts = _counting_order(codes, len(ids))
    return ids, [order[starts[i]:starts[i + 1]] for i in range(len(ids))]


def _unit_rows(inp: _Inputs, only_units) -> tuple[np.ndarray, list[np.ndarray]]:
    """Unit ids (sorted) and the time-sorted event indices of each."""
    if only_units is None:
        ids, rows = _split_by_key(inp.units)
        keep = ids != NO_UNIT
        return ids[keep], [r for r, k in zip(rows, keep) if k]
    ids = np.unique(np.asarray(only_units, dtype=np.int64))
    if NO_UNIT in ids:
        raise RigsideError(f"units to compute must be unit ids, got {NO_UNIT} (in no unit)")
    rows = [np.flatnonzero(inp.units == u) for u in ids]
    missing = [int(u) for u, r in zip(ids, rows) if len(r) == 0]
    if missing:
        raise RigsideError(f"units to compute must have events, got none for unit(s) {missing[:10]}")
    return ids, rows


def _mode(x: np.ndarray) -> int:
    vals, counts = np.unique(x, return_counts=True)
    return int(vals[np.argmax(counts)])


def main_channel(event_channels: np.ndarray) -> int:
    """A unit's main channel: the channel on which most of its events were detected.

    Parameters
    ----------
    event_channels
        Detection channel of each of the unit's events (at least one).

    Returns
    -------
    int
        The most frequent channel (the lowest of tied channels). Imported units carry no detection
        channel; the audit places them by their mean waveform instead (``rigside.core.audit.imported``).
    """
    if len(event_channels) == 0:
        raise RigsideError("a unit's main channel needs events, got none")
    return _mode(np.asarray(event_channels))


class _GroupSpace:
    """Centred float64 features of one channel group, built once and reused for its units."""

    def __init__(self, inp: _Inputs, only_groups: set[int] | None):
        self._inp = inp
        self._cache: dict[int, tuple[np.ndarray, np.ndarray]] = {}
        if only_groups is None:
            gids, rows = _split_by_key(inp.groups)
            self._index = dict(zip(gids.tolist(), rows))
        else:
            self._index = {g: np.flatnonzero(inp.groups == g) for g in only_groups}

    def get(self, g: int) -> tuple[np.ndarray, np.ndarray]:
        if g not in self._cache:
            self._cache.clear()
            idx = self._index[g]
            x = self._inp.features[idx].astype(np.float64)
            x -= x.mean(axis=0)
            self._cache[g] = (x, self._inp.units[idx])
        return self._cache[g]


def unit_metrics_table(times_s: np.ndarray, units: np.ndarray, duration_s: float,
                       amplitudes_uv: np.ndarray, amplitude_sigma: np.ndarray, channel: np.ndarray,
                       sigma_uv: np.ndarray, threshold_sigma, features: np.ndarray | None,
                       event_groups: np.ndarray | None = None, params: MetricParams | None = None,
                       progress: ProgressFn = None, cancel: CancelFn = None,
                       only_units=None, event_positions: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Quality metrics of every unit, one row per unit id (sorted).

    Parameters
    ----------
    times_s
        Event times (s), sorted, within [0, duration_s].
    units
        Unit id of each event (integers). Every id present gets a row except
        :data:`~rigside.core.units.sorting.NO_UNIT` (in no unit), whose events still count as events
        outside every unit of their group for isolation distance and L-ratio.
    duration_s
        Recording length (s).
    amplitudes_uv, amplitude_sigma
        Signed peak of each event on its detection channel (uV), and its magnitude in
        multiples of that channel's noise sigma.
    channel
        Detection channel of each event (index into ``sigma_uv``).
    sigma_uv
        Robust noise sigma of each channel (uV).
    threshold_sigma
        Detection threshold in sigma: one number or one per channel.
    features
        Events x features (one feature space per channel group), or None when there are none
        (isolation distance and L-ratio are then NaN with a reason).
    event_groups
        Channel group of each event (None: all events in one group). A unit is compared with
        all other events of the group holding most of its events; its events in other groups
        take no part in isolation distance and L-ratio.
    params
        Metric settings (refractory and censored periods, presence bins, ...).
    progress, cancel
        Progress callback and cancel check (see :mod:`rigside.core.progress`).
    only_units
        Compute only these unit ids (e.g. after one unit changed); None for all.
    event_positions
        Events x 2 estimated positions (``x_um``, ``y_um``) on a probe, or None: the position and
        drift columns (:data:`~rigside.core.quality.unit_position.POSITION_COLUMNS`) are then absent.

    Returns
    -------
    dict of str to numpy.ndarray
        Columns named in :data:`COLUMNS` (and the position columns). Main-channel metrics (SNR,
        missed fraction, amplitude drift) use the unit's events detected on its main channel.
    """
    params = params or MetricParams()
    params.validate()
    inp = _Inputs(times_s, units, duration_s, amplitudes_uv, amplitude_sigma, channel, sigma_uv,
                  threshold_sigma, features, event_groups, event_positions)
    ids, rows = _unit_rows(inp, only_units)
    unit_groups = [_mode(inp.groups[r]) for r in rows]
    ordered = sorted(range(len(ids)), key=lambda i: unit_groups[i])
    space = None
    if inp.features is not None:
        space = _GroupSpace(inp, None if only_units is None else set(unit_groups))
    names = COLUMNS if inp.positions is None else COLUMNS | POSITION_COLUMNS
    out: dict[str, list] = {name: [None] * len(ids) for name in names}
    for done, i in enumerate(ordered):
        check(cancel)
        row = _one_unit(inp, params, int(ids[i]), rows[i], unit_groups[i], space)
        for name, value in row.items():
            out[name][i] = value
        report(progress, (done + 1) / max(len(ids), 1), f"unit {ids[i]}")
    return {name: np.array(values, dtype=column_dtype(name)) for name, values in out.items()}


def column_dtype(column: str) -> type:
    """The dtype of a column of the table: text for reasons, int64 for counts and ids, else float64."""
    if column.endswith("_reason"):
        return str
    return np.int64 if column in INT_COLUMNS else np.float64


def _one_unit(inp: _Inputs, params: MetricParams, unit: int, rows: np.ndarray, group: int,
              space: _GroupSpace | None) -> dict:
    t = inp.times[rows]
    main = main_channel(inp.channel[rows])
    on_main = rows[inp.channel[rows] == main]
    isi = isi_violations(t, inp.duration, params.refractory_ms / 1e3, params.censored_ms / 1e3)
    if space is None:
        iso_v, iso_r = math.nan, "no features were given"
        lr_v, lr_r = math.nan, "no features were given"
    else:
        x, group_units = space.get(group)
        sep = separation_of_checked(x, group_units == unit)
        iso_v, iso_r = sep.isolation_distance.value, sep.isolation_distance.reason
        lr_v, lr_r = sep.l_ratio.value, sep.l_ratio.reason
    s = snr(inp.amp_uv[on_main], inp.sigma_uv[main])
    miss = missed_fraction(inp.amp_sigma[on_main], inp.threshold[main], params.missed_min_events)
    drift = amplitude_drift(inp.times[on_main], inp.amp_uv[on_main])
    cv = cv_isi(t)
    return _position_row(inp, rows) | {
        "unit": unit, "group": group, "main_channel": main, "n_events": len(rows),
        "rate_hz": len(rows) / inp.duration, "cv_isi": cv.value, "cv_isi_reason": cv.reason,
        "isi_violations": isi.n_violations,
        "contamination": isi.contamination, "contamination_reason": isi.reason,
        "contamination_poisson": isi.contamination_poisson,
        "contamination_poisson_reason": isi.reason_poisson,
        "isolation_distance": iso_v, "isolation_distance_reason": iso_r,
        "l_ratio": lr_v, "l_ratio_reason": lr_r,
        "snr": s.value, "snr_reason": s.reason,
        "missed_fraction": miss.value, "missed_fraction_reason": miss.reason,
        "presence_ratio": presence_ratio(t, inp.duration, params.presence_bin_s,
                                         params.presence_min_bins).value,
        "amplitude_slope_uv_per_min": drift.slope_uv_per_min,
        "amplitude_change_fraction": drift.relative_change,
        "amplitude_drift_reason": drift.reason,
    }


def _position_row(inp: _Inputs, rows: np.ndarray) -> dict:
    """The position columns of one unit (none without event positions)."""
    if inp.positions is None:
        return {}
    x, y = unit_position(inp.positions[rows, 0], inp.positions[rows, 1])
    drift = position_drift(inp.times[rows], inp.positions[rows, 1])
    return {"x_um": x, "y_um": y, "drift_um_per_min": drift.value, "drift_reason": drift.reason}


def unit_metrics_for_events(events: EventTable, units: np.ndarray, features: Features | None,
                            threshold_sigma, params: MetricParams | None = None,
                            progress: ProgressFn = None, cancel: CancelFn = None,
                            only_units=None) -> dict[str, np.ndarray]:
    """:func:`unit_metrics_table` for an event table, its unit ids and its features.

    Only the principal-component columns (``PC1``, ``PC2``, ...) of ``features`` span the
    feature space of isolation distance and L-ratio: shape measures such as a width counted
    in whole samples often take one value across a unit and make its covariance singular.
    ``threshold_sigma`` is the detection threshold in sigma (one number or one per channel,
    e.g. ``events.thresholds_sigma(...)``). Events with positions (a probe) add the position columns.
    """
    pcs = None
    if features is not None:
        cols = [i for i, name in enumerate(features.names) if name.startswith("PC")]
        if not cols:
            raise RigsideError(f"features must hold principal components (PC1, ...), got "
                               f"{', '.join(features.names)}")
        pcs = features.values[:, cols]
    positions = None if events.x_um is None else np.column_stack([events.x_um, events.y_um])
    return unit_metrics_table(events.time_s, units, events.duration_s, events.amplitude_uv,
                              events.amplitude_sigma, events.channel, events.sigma_uv,
                              threshold_sigma, pcs, events.group, params, progress, cancel,
                              only_units, positions)


def sorting_unit_table(events: EventTable, sorting, threshold_sigma, params: MetricParams | None = None,
                       progress: ProgressFn = None, cancel: CancelFn = None) -> dict[str, np.ndarray]:
    """Quality numbers of every unit of a :class:`rigside.core.units.sorting.Sorting`, with its ``label`` column
    (what the metrics CSV holds); see :func:`unit_metrics_for_events`."""
    from rigside.core.signal.features import Features
    features = Features(sorting.data.features, list(sorting.data.feature_names))
    table = unit_metrics_for_events(events, sorting.assignments, features, threshold_sigma, params,
                                    progress=progress, cancel=cancel)
    table["label"] = [sorting.unit(u).label for u in table["unit"].tolist()]
    return table
