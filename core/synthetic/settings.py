"""The settings of a practice recording: what a trainer varies, checked, and kept as TOML.

A :class:`SynthSettings` describes one synthetic recording completely; with its seed, the same
settings give the same bytes whether the recording is made from the window, the command line
or a settings file handed out to a class. The defaults are the bundled demo scenario. Pure
Python (no NumPy) so the command line can show the defaults without loading the engine.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields, replace
from pathlib import Path
from typing import Any

from rigside.core.errors import ParamError
from rigside.core.textparse import parse_toml

SETTINGS_SUFFIX = ".synth.toml"
"""A practice recording's settings are written beside it as ``NAME.synth.toml``."""
COLOURS = ("coloured", "white")
LAYOUTS = ("bundles",)
MAX_SECONDS = 24 * 3600.0
MAX_CHANNELS = 1024
MAX_UNITS = 512
SECTION = "practice_recording"
DEMO_RATES_HZ = (1.0, 2.0, 3.0, 5.0, 8.0, 10.0, 12.0, 15.0, 20.0, 25.0, 30.0, 40.0)
"""The demo's twelve firing rates; other rate ranges rescale them on a log scale."""
TRUTH_ROW_BYTES = 22
"""About the length of one ground-truth row (unit, sample, time in seconds)."""
LABELS = {"seconds": "length in seconds", "channels": "channel count", "group_size": "bundle size",
          "rate_hz": "sampling rate in Hz", "units": "unit count", "amplitude_uv": "peak amplitude range in uV",
          "snr": "SNR range", "rates_hz": "firing rate range in Hz", "noise_uv": "noise SD in uV",
          "hum_uv": "mains hum in uV", "drift_uv": "baseline drift in uV",
          "artefacts_per_min": "artefacts per minute", "overlap_fraction": "overlap fraction", "seed": "seed"}
FLOAT_KEYS = ("seconds", "rate_hz", "noise_uv", "hum_uv", "drift_uv", "artefacts_per_min", "overlap_fraction")


@dataclass(frozen=True)
class SynthSettings:
    """Everything that decides a practice recording (the defaults are the demo scenario).

    Amplitudes are raw peak amplitudes of a unit on its main channel, drawn uniformly from
    ``amplitude_uv``; ``snr`` (when given) replaces them by that range times the expected
    noise sigma in the 300-6000 Hz detection band. ``noise_uv`` is the SD of the white part of
    the raw background; "coloured" noise adds a low-frequency part and noise shared within a
    bundle in the demo's proportions. ``hum_uv`` and ``drift_uv`` are the largest per-channel
    amplitudes of the 50 Hz mains hum and the 0.3 Hz baseline drift (channels draw between
    3/8 and 1, and between 1/3 and 1, of them). ``overlap_fraction`` is the share of each
    unit's spikes that get a near-coincident spike (0.2-1 ms later) of another unit of the bundle.
    """

    seconds: float = 60.0
    channels: int = 16
    layout: str = "bundles"
    group_size: int = 4
    rate_hz: float = 30000.0
    units: int | None = None               # None: three per bundle
    amplitude_uv: tuple[float, float] = (50.0, 170.0)
    snr: tuple[float, float] | None = None
    rates_hz: tuple[float, float] = (1.0, 40.0)
    noise_uv: float = 11.0
    noise_colour: str = "coloured"
    hum_uv: float = 40.0
    drift_uv: float = 150.0
    artefacts_per_min: float = 5.0
    overlap_fraction: float = 0.0
    seed: int = 0

    def n_groups(self) -> int:
        """Number of bundles the channels fall into."""
        return -(-self.channels // self.group_size)

    def n_units(self) -> int:
        """The number of true units (three per bundle unless ``units`` is set)."""
        return 3 * self.n_groups() if self.units is None else self.units

    def n_samples(self) -> int:
        return int(round(self.seconds * self.rate_hz))

    def raw_bytes(self) -> int:
        """Size of the int16 raw file these settings write."""
        return self.n_samples() * self.channels * 2

    def rates(self) -> list[float]:
        """The twelve firing rates units take in turn: the demo's, rescaled to ``rates_hz`` on a log scale."""
        lo, hi = self.rates_hz
        if (lo, hi) == (DEMO_RATES_HZ[0], DEMO_RATES_HZ[-1]):
            return list(DEMO_RATES_HZ)
        top = math.log(DEMO_RATES_HZ[-1])
        return [lo * (hi / lo) ** (math.log(r) / top) for r in DEMO_RATES_HZ]

    def estimated_bytes(self) -> int:
        """About how much the recording takes on disk: the raw file plus its ground truth."""
        rates = self.rates()
        spikes = self.n_units() * sum(rates) / len(rates) * self.seconds * (1 + self.overlap_fraction)
        return self.raw_bytes() + int(spikes * TRUTH_ROW_BYTES)

    def validate(self) -> SynthSettings:
        """Check every value; raise :class:`ParamError` with one line naming the first bad one."""
        _number("seconds", self.seconds, 0.0, MAX_SECONDS, low_open=True)
        _integer("channels", self.channels, 1, MAX_CHANNELS)
        if self.layout not in LAYOUTS:
            raise ParamError(f"practice layout must be one of {', '.join(LAYOUTS)}, got {self.layout!r}")
        _integer("group_size", self.group_size, 1, 64)
        _number("rate_hz", self.rate_hz, 1000.0, 100000.0)
        if self.units is not None:
            _integer("units", self.units, 0, MAX_UNITS)
        _span("amplitude_uv", self.amplitude_uv, 1.0, 5000.0)
        if self.snr is not None:
            _span("snr", self.snr, 0.1, 200.0)
        _span("rates_hz", self.rates_hz, 0.01, 200.0)
        _number("noise_uv", self.noise_uv, 0.0, 1000.0)
        if self.noise_colour not in COLOURS:
            raise ParamError(f"practice noise_colour must be one of {', '.join(COLOURS)}, got {self.noise_colour!r}")
        _number("hum_uv", self.hum_uv, 0.0, 5000.0)
        _number("drift_uv", self.drift_uv, 0.0, 5000.0)
        _number("artefacts_per_min", self.artefacts_per_min, 0.0, 600.0)
        _number("overlap_fraction", self.overlap_fraction, 0.0, 0.5)
        _integer("seed", self.seed, 0, 2 ** 63 - 1)
        return self

    def to_dict(self) -> dict[str, Any]:
        """Plain values for TOML (unset options left out, pairs as lists)."""
        out = {}
        for k, v in asdict(self).items():
            if v is not None:
                out[k] = list(v) if isinstance(v, tuple) else v
        return out

    @classmethod
    def from_dict(cls, values: dict[str, Any]) -> SynthSettings:
        """Settings from plain values (missing keys keep their defaults); unknown keys are refused."""
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(values) - known)
        if unknown:
            raise ParamError(f"practice settings must use only the keys {', '.join(sorted(known))}, "
                             f"got {', '.join(map(str, unknown))}")
        given = {}
        for k, v in values.items():
            if isinstance(v, list):
                if len(v) != 2:
                    raise ParamError(f"practice {k} must be a pair [low, high], got {v!r}")
                v = tuple(float(x) if _is_number(x) else x for x in v)
            elif k in FLOAT_KEYS and _is_number(v):
                v = float(v)
            given[k] = v
        return replace(cls(), **given).validate()

    def to_toml(self) -> str:
        import tomli_w
        return "# rigside practice recording settings\n" + tomli_w.dumps({SECTION: self.to_dict()})

    @classmethod
    def from_toml(cls, text: str, what: str = "practice settings") -> SynthSettings:
        table = parse_toml(text, what, ParamError)
        unknown = sorted(set(table) - {SECTION})
        if unknown or not isinstance(table.get(SECTION), dict):
            raise ParamError(f"{what} must hold one [{SECTION}] table, got {', '.join(unknown) or 'none'}")
        return cls.from_dict(table[SECTION])

    @classmethod
    def load(cls, path: str | Path) -> SynthSettings:
        """Read a ``.synth.toml`` file (one clear :class:`ParamError` for any problem)."""
        what = f"practice settings file {str(path)!r}"
        try:
            text = Path(path).read_text(encoding="utf-8")
        except FileNotFoundError:
            raise ParamError(f"{what} must exist") from None
        except IsADirectoryError:
            raise ParamError(f"{what} must be a file, got a directory") from None
        except UnicodeDecodeError as exc:
            raise ParamError(f"{what} must be UTF-8 TOML text, got {exc}") from None
        return cls.from_toml(text, what)

    def save(self, path: str | Path) -> Path:
        """Write the settings atomically as TOML."""
        from rigside.core.io.atomic import atomic_write
        text = self.to_toml()
        return atomic_write(Path(path), lambda tmp: tmp.write_text(text, encoding="utf-8", newline="\n"))


def settings_path(recording: str | Path) -> Path:
    """Where the settings of the practice recording ``recording`` are kept."""
    p = Path(recording)
    return p.with_name(p.stem + SETTINGS_SUFFIX)


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _number(name: str, v: Any, low: float, high: float, low_open: bool = False) -> None:
    ok = _is_number(v) and (v > low if low_open else v >= low) and v <= high
    if not ok:
        span = f"> {low:g} and at most {high:g}" if low_open else f"from {low:g} to {high:g}"
        raise ParamError(f"practice {LABELS[name]} ({name}) must be a number {span}, got {v!r}")


def _integer(name: str, v: Any, low: int, high: int) -> None:
    if not (isinstance(v, int) and not isinstance(v, bool) and low <= v <= high):
        raise ParamError(f"practice {LABELS[name]} ({name}) must be a whole number from {low} to {high}, got {v!r}")


def _span(name: str, v: Any, low: float, high: float) -> None:
    ok = (isinstance(v, tuple) and len(v) == 2 and all(_is_number(x) for x in v)
          and low <= v[0] <= v[1] <= high)
    if not ok:
        raise ParamError(f"practice {LABELS[name]} ({name}) must be a pair low <= high within {low:g} to {high:g}, "
                         f"got {v!r}")
