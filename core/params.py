"""Parameter dataclasses, validated in one place, with TOML load and save.

Every validation error has the same shape: "<what> must be <rule>, got <value>".
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import asdict, dataclass, field, fields
from pathlib import Path
from typing import Any

import tomli_w

from rigside.core.errors import ParamError
from rigside.core.io.atomic import atomic_write
from rigside.core.textparse import parse_toml

POLARITIES = ("negative", "positive", "both")
MEMORY_BUDGET_BYTES = 512 << 20
"""Working memory the sample buffers of noise estimation and detection may take together
(see :meth:`Params.check_memory`)."""
BUFFER_COPIES = 4
"""float32 copies of a block held while it is read, filtered and searched (raw, filtered, work)."""


def _require(ok: bool, message: str) -> None:
    if not ok:
        raise ParamError(message)


def _finite(name: str, value: float) -> None:
    _require(isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value),
             f"{name} must be a finite number, got {value!r}")


def _positive(name: str, value: float, unit: str, zero_allowed: bool = False) -> None:
    """A finite number above 0 (at least 0 with ``zero_allowed``) in ``unit`` (values in sigma shown bare)."""
    _finite(name, value)
    shown = f"{value:g}" if unit == "sigma" else f"{value:g} {unit}"
    _require(value >= 0 if zero_allowed else value > 0,
             f"{name} must be {'at least' if zero_allowed else 'above'} 0 {unit}, got {shown}")


def _between(name: str, value: float, low: float, high: float, unit: str) -> None:
    _finite(name, value)
    _require(low <= value <= high, f"{name} must be between {low:g} and {high:g} {unit}, got {value:g} {unit}")


def _integer(name: str, value: Any, low: int, high: int) -> None:
    _require(isinstance(value, int) and not isinstance(value, bool) and low <= value <= high,
             f"{name} must be an integer from {low} to {high}, got {value!r}")


@dataclass
class FilterParams:
    """Zero-phase Butterworth band-pass and optional common median reference."""

    low_hz: float = 300.0
    high_hz: float = 6000.0
    order: int = 3
    common_reference: bool = False

    def validate(self, rate_hz: float | None = None) -> None:
        _positive("band low edge", self.low_hz, "Hz")
        _finite("band high edge", self.high_hz)
        _require(self.high_hz > self.low_hz,
                 f"band high edge must be above the low edge ({self.low_hz:g} Hz), got {self.high_hz:g} Hz")
        _integer("filter order", self.order, 1, 8)
        _require(isinstance(self.common_reference, bool),
                 f"common reference must be true or false, got {self.common_reference!r}")
        if rate_hz is not None:
            nyq = rate_hz / 2
            _require(self.high_hz < nyq,
                     f"band high edge must be below Nyquist ({nyq:g} Hz), got {self.high_hz:g} Hz")


@dataclass
class NoiseParams:
    """Robust noise estimate from windows sampled across the whole file."""

    n_windows: int = 40
    window_s: float = 0.25
    seed: int = 0

    def validate(self) -> None:
        _integer("noise window count", self.n_windows, 1, 10_000)
        _finite("noise window length", self.window_s)
        _require(0 < self.window_s <= 10, f"noise window length must be above 0 and at most 10 s, "
                                          f"got {self.window_s:g} s")
        _integer("noise seed", self.seed, 0, 2**32 - 1)


@dataclass
class DetectParams:
    """Threshold detection.

    ``threshold_sigma`` is used unless ``threshold_uv`` is set, and both unless
    ``channel_thresholds_sigma`` (one sigma multiple per channel) is. ``floor_sigma`` is the
    lowest threshold kept in the event table so that any higher threshold is a look-up;
    ``None`` means "the detection threshold itself".
    """

    threshold_sigma: float = 4.5
    threshold_uv: float | None = None
    polarity: str = "negative"
    dead_time_ms: float = 1.0
    floor_sigma: float | None = None
    artefact_channel_fraction: float = 0.5
    artefact_sigma: float = 5.0
    artefact_window_ms: float = 0.5
    channel_thresholds_sigma: list[float] | None = None

    def validate(self) -> None:
        _positive("threshold", self.threshold_sigma, "sigma")
        per = self.channel_thresholds_sigma
        _require(per is None or (isinstance(per, list) and len(per) > 0),
                 f"per-channel thresholds must be a non-empty list, got {per!r}")
        for value in per or ():
            _positive("per-channel threshold", value, "sigma")
        if self.threshold_uv is not None:
            _positive("threshold in microvolts", self.threshold_uv, "uV")
        _require(self.polarity in POLARITIES,
                 f"polarity must be one of {', '.join(POLARITIES)}, got {self.polarity!r}")
        _between("dead time", self.dead_time_ms, 0, 100, "ms")
        if self.floor_sigma is not None:
            _positive("look-up floor", self.floor_sigma, "sigma")
        _finite("artefact channel fraction", self.artefact_channel_fraction)
        _require(0 < self.artefact_channel_fraction <= 1,
                 f"artefact channel fraction must be in (0, 1], got {self.artefact_channel_fraction:g}")
        _positive("artefact level", self.artefact_sigma, "sigma")
        _positive("artefact window", self.artefact_window_ms, "ms", zero_allowed=True)


@dataclass
class SnippetParams:
    """Waveform windows around each event, and the features computed from them."""

    before_ms: float = 0.6
    after_ms: float = 1.0
    n_pcs: int = 3
    pca_fit_events: int = 20000
    seed: int = 0

    def validate(self) -> None:
        _positive("snippet start", self.before_ms, "ms", zero_allowed=True)
        _positive("snippet end", self.after_ms, "ms")
        _require(self.before_ms + self.after_ms <= 20,
                 f"snippet length must be at most 20 ms, got {self.before_ms + self.after_ms:g} ms")
        _integer("number of principal components", self.n_pcs, 1, 20)
        _integer("PCA fit sample", self.pca_fit_events, 10, 1_000_000)
        _integer("snippet seed", self.seed, 0, 2**32 - 1)


@dataclass
class MetricParams:
    """Settings of the per-unit quality metrics."""

    refractory_ms: float = 1.5
    censored_ms: float = 0.0
    """0 (the default) means "the detection dead time": see :func:`metric_settings`."""
    presence_bin_s: float = 60.0
    presence_min_bins: int = 10
    missed_min_events: int = 20

    def validate(self) -> None:
        _positive("refractory period", self.refractory_ms, "ms")
        _positive("censored period", self.censored_ms, "ms", zero_allowed=True)
        _require(self.censored_ms < self.refractory_ms,
                 f"censored period must be shorter than the refractory period ({self.refractory_ms:g} ms), "
                 f"got {self.censored_ms:g} ms")
        _positive("presence bin", self.presence_bin_s, "s")
        for name, v in (("presence minimum bin count", self.presence_min_bins),
                        ("missed-spike minimum event count", self.missed_min_events)):
            _require(isinstance(v, int) and not isinstance(v, bool) and v >= 1,
                     f"{name} must be an integer of at least 1, got {v!r}")


@dataclass
class ClusterParams:
    """Settings of the first-pass clustering (all validated by :meth:`validate`).

    Attributes
    ----------
    k, k_min, k_max, patience
        Forced clusters per group (``None``: by BIC over ``k_min..k_max``, stopped after ``patience`` worse k).
    fit_events, max_iter, tol, seed
        Largest fit subsample of a group; EM limits (scikit-learn meaning); seed of subsample and fit.
    merge_overlap
        Components merge while their misclassification probability is above this (1: never).
    min_unit_events, min_unit_share, fragment_fit, split_test
        Fragments (clusters under max(``min_unit_events``, ``min_unit_share`` x the group's
        events)) are not units; their events join the best-fitting unit within the
        ``fragment_fit`` chi-square quantile, else stay unassigned; ``split_test`` re-examines
        every unit (see :mod:`rigside.core.units.refine`).
    split_fragments, split_overlap, split_gap_p, gap_censored_ms, gap_refractory_ms, region_um
        A split part too small to be a unit is a fragment (off: no such split); the overlap of parts
        whose refractory gap (lags ``gap_censored_ms`` to ``gap_refractory_ms``) was judged; the gap
        p-value joining the parts; the length of a probe shank's overlapping regions (:mod:`.units.regions`).
    """

    k: int | None = None
    k_min: int = 1
    k_max: int = 8
    patience: int = 2
    fit_events: int = 8000
    max_iter: int = 200
    tol: float = 1e-3
    merge_overlap: float = 0.02
    seed: int = 0
    min_unit_events: int = 20
    min_unit_share: float = 0.02
    fragment_fit: float = 0.99
    split_test: bool = True
    split_fragments: bool = True
    split_overlap: float = 0.04
    split_gap_p: float = 0.001
    gap_censored_ms: float = 1.0
    gap_refractory_ms: float = 2.0
    region_um: float = 100.0

    def validate(self) -> None:
        """Raise :class:`ParamError` for any value out of range."""
        if self.k is not None:
            _integer("forced cluster count", self.k, 1, 64)
        _integer("smallest cluster count", self.k_min, 1, 64)
        _integer("largest cluster count", self.k_max, self.k_min, 64)
        _integer("search patience", self.patience, 1, 64)
        _integer("clustering fit sample", self.fit_events, 100, 1_000_000)
        _integer("EM iteration limit", self.max_iter, 1, 100_000)
        _integer("clustering seed", self.seed, 0, 2**32 - 1)
        if not (isinstance(self.tol, (int, float)) and math.isfinite(self.tol) and self.tol > 0):
            raise ParamError(f"EM tolerance must be a finite number above 0, got {self.tol!r}")
        if not (isinstance(self.merge_overlap, (int, float)) and 0 <= self.merge_overlap <= 1):
            raise ParamError(f"merge overlap must be a number from 0 to 1, got {self.merge_overlap!r}")
        _integer("smallest unit size", self.min_unit_events, 1, 1_000_000)
        for what, v in (("smallest unit share", self.min_unit_share), ("fragment fit quantile", self.fragment_fit)):
            if not (isinstance(v, (int, float)) and not isinstance(v, bool) and 0 <= v < 1):
                raise ParamError(f"{what} must be a number from 0 to below 1, got {v!r}")
        for what, v in (("split test", self.split_test), ("split fragments", self.split_fragments)):
            _require(isinstance(v, bool), f"{what} must be true or false, got {v!r}")
        _between("split overlap", self.split_overlap, 0, 1, "")
        _between("split gap p-value", self.split_gap_p, 0, 1, "")
        for what, v in (("refractory gap start", self.gap_censored_ms), ("refractory gap end", self.gap_refractory_ms)):
            _between(what, v, 0, 5, "ms")
        _require(self.gap_censored_ms < self.gap_refractory_ms, "refractory gap start must be before its end")
        _positive("probe region length", self.region_um, "um")

    def to_dict(self) -> dict[str, Any]:
        """Plain dict (``k`` omitted when ``None``)."""
        return {k: v for k, v in asdict(self).items() if v is not None}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "ClusterParams":
        """Build from a dict, refusing unknown keys, then validate."""
        if not isinstance(data, dict):
            raise ParamError(f"clustering parameters must be a table, got {data!r}")
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(data) - known)
        if unknown:
            raise ParamError(f"clustering parameter must be one of {', '.join(sorted(known))}, "
                             f"got {', '.join(unknown)}")
        out = cls(**data)
        for name in (f.name for f in fields(cls) if f.type == "float"):
            value = getattr(out, name)
            if isinstance(value, int) and not isinstance(value, bool):
                setattr(out, name, float(value))
        out.validate()
        return out


@dataclass
class ProbeParams:
    """Probe recordings (with site positions): each site's neighbourhood is the sites of its shank
    within ``radius_um`` (see :mod:`rigside.core.signal.neighbourhoods`)."""

    radius_um: float = 50.0

    def validate(self) -> None:
        _finite("neighbourhood radius", self.radius_um)
        _require(0 < self.radius_um <= 10_000,
                 f"neighbourhood radius must be above 0 and at most 10000 um, got {self.radius_um:g} um")


@dataclass
class OverlapParams:
    """The second pass of ``sort`` (:mod:`rigside.core.signal.overlaps`): ``max_misfit`` is the largest mean
    squared misfit (noise variances per sample) the two fitted templates may leave, ``min_share`` the least
    amplitude of a found spike as a share of the event it overlaps."""

    enabled: bool = True
    max_misfit: float = 4.0
    min_share: float = 0.45

    def validate(self) -> None:
        _require(isinstance(self.enabled, bool), f"overlap pass switch must be true or false, got {self.enabled!r}")
        _between("template misfit", self.max_misfit, 0.1, 100, "noise variances")
        _between("overlap amplitude share", self.min_share, 0, 10, "")


@dataclass
class RunParams:
    """Streaming: chunk length and worker threads."""

    chunk_s: float = 1.0
    workers: int = 2

    def validate(self) -> None:
        _between("chunk length", self.chunk_s, 0.01, 60, "s")
        _integer("worker count", self.workers, 1, 64)


@dataclass
class Params:
    """All pipeline parameters; the unit of TOML load and save."""

    filter: FilterParams = field(default_factory=FilterParams)
    noise: NoiseParams = field(default_factory=NoiseParams)
    detect: DetectParams = field(default_factory=DetectParams)
    snippets: SnippetParams = field(default_factory=SnippetParams)
    cluster: ClusterParams = field(default_factory=ClusterParams)
    metrics: MetricParams = field(default_factory=MetricParams)
    probe: ProbeParams = field(default_factory=ProbeParams)
    overlaps: OverlapParams = field(default_factory=OverlapParams)
    run: RunParams = field(default_factory=RunParams)

    def validate(self, rate_hz: float | None = None) -> None:
        """Validate every section; ``rate_hz`` enables the Nyquist check."""
        self.filter.validate(rate_hz)
        self.noise.validate()
        self.detect.validate()
        self.snippets.validate()
        self.cluster.validate()
        self.metrics.validate()
        self.probe.validate()
        self.overlaps.validate()
        self.run.validate()

    def check_memory(self, rate_hz: float, n_channels: int) -> None:
        """Refuse settings whose sample buffers would exceed :data:`MEMORY_BUDGET_BYTES`: the
        pooled noise windows (float32, every channel) plus :data:`BUFFER_COPIES` copies of one
        window, and :data:`BUFFER_COPIES` copies of one detection chunk per worker."""
        frame = 4 * BUFFER_COPIES * n_channels
        budget = MEMORY_BUDGET_BYTES >> 20
        windows = (self.noise.n_windows + BUFFER_COPIES) * self.noise.window_s
        _require(windows * rate_hz * 4 * n_channels <= MEMORY_BUDGET_BYTES,
                 f"noise windows (count + {BUFFER_COPIES}) x length must keep their buffers within {budget} MiB "
                 f"for {n_channels} channels at {rate_hz:g} Hz (at most "
                 f"{MEMORY_BUDGET_BYTES / (rate_hz * 4 * n_channels):.3g} s), got "
                 f"({self.noise.n_windows} + {BUFFER_COPIES}) x {self.noise.window_s:g} s")
        chunks = self.run.chunk_s * rate_hz * frame * self.run.workers
        _require(chunks <= MEMORY_BUDGET_BYTES,
                 f"chunk length x worker count must keep detection buffers within {budget} MiB for "
                 f"{n_channels} channels at {rate_hz:g} Hz (chunk x workers at most "
                 f"{MEMORY_BUDGET_BYTES / (rate_hz * frame):.3g} s), got {self.run.chunk_s:g} s x "
                 f"{self.run.workers}")

    def to_dict(self) -> dict[str, Any]:
        """Plain nested dict (``None`` values dropped, as TOML has no null)."""
        return {f.name: {k: v for k, v in dataclasses.asdict(getattr(self, f.name)).items()
                         if v is not None}
                for f in fields(self)}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "Params":
        """Build from a nested dict, refusing unknown sections and keys."""
        out = cls()
        for section, values in data.items():
            _require(section in {f.name for f in fields(cls)},
                     f"parameter section must be one of {', '.join(f.name for f in fields(cls))}, "
                     f"got [{section}]")
            _require(isinstance(values, dict),
                     f"parameter section [{section}] must be a table, got {values!r}")
            target = getattr(out, section)
            known = {f.name: f for f in fields(target)}
            for key, value in values.items():
                _require(key in known, f"parameter [{section}] {key} must be one of "
                                       f"{', '.join(known)}, got an unknown key")
                default = getattr(type(target)(), key)
                if isinstance(default, float) and isinstance(value, int) and not isinstance(value, bool):
                    value = float(value)
                setattr(target, key, value)
        return out

    def save_toml(self, path: str | Path) -> None:
        """Write the parameters as TOML (atomically: a reader sees the old file or the new one)."""
        text = tomli_w.dumps(self.to_dict())
        atomic_write(path, lambda tmp: tmp.write_text(text, encoding="utf-8", newline="\n"))

    @classmethod
    def load_toml(cls, path: str | Path) -> "Params":
        """Read parameters from a TOML file; missing keys keep their defaults."""
        try:
            text = Path(path).read_text(encoding="utf-8")
        except FileNotFoundError:
            raise ParamError(f"parameter file must exist, got {str(path)!r}") from None
        except UnicodeDecodeError as exc:
            raise ParamError(f"parameter file must be valid TOML (UTF-8 text), got {str(path)!r}: {exc}") from None
        return cls.from_dict(parse_toml(text, f"parameter file {str(path)!r}", ParamError))
