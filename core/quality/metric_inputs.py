"""Checks of the inputs shared by the quality metrics, and the value-with-reason result.

Bad input (wrong shape, NaN, unsorted times, out-of-range parameters) raises a
:class:`~rigside.core.errors.RigsideError` subclass with a "<what> must be <rule>, got <value>" message.
A metric that is undefined for valid input is not an error: it is NaN with a reason.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rigside.core.errors import ParamError, RigsideError


@dataclass(frozen=True)
class MetricValue:
    """A metric value and, when it is undefined, why.

    Attributes
    ----------
    value
        The number, or NaN when the metric is undefined for this input.
    reason
        Empty when ``value`` is defined; otherwise a short sentence saying why it is not.
    """

    value: float
    reason: str = ""

    def __float__(self) -> float:
        return float(self.value)

    @property
    def defined(self) -> bool:
        """True when the metric has a value."""
        return not self.reason


def undefined(reason: str) -> MetricValue:
    """A NaN metric value carrying ``reason``."""
    return MetricValue(math.nan, reason)


def positive(name: str, value: float, unit: str = "s", allow_zero: bool = False) -> float:
    """Check a finite positive (or non-negative) scalar parameter and return it as float."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParamError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(v) or v < 0 or (v == 0 and not allow_zero):
        rule = "at least 0" if allow_zero else "above 0"
        raise ParamError(f"{name} must be a finite number {rule} {unit}, got {value!r}")
    return v


def float_1d(x, name: str) -> np.ndarray:
    """A 1-D float64 array of finite values."""
    a = np.asarray(x, dtype=np.float64)
    if a.ndim != 1:
        raise RigsideError(f"{name} must be a 1-D array, got shape {a.shape}")
    if not np.all(np.isfinite(a)):
        bad = int(np.count_nonzero(~np.isfinite(a)))
        raise RigsideError(f"{name} must hold finite numbers, got {bad} NaN or infinite values")
    return a


def spike_times(times, duration_s: float | None = None, name: str = "spike times") -> np.ndarray:
    """Sorted finite spike times in seconds, inside [0, duration_s] when a duration is given."""
    t = float_1d(times, name)
    if len(t) > 1:
        steps = np.diff(t)
        if np.any(steps < 0):
            first = int(np.flatnonzero(steps < 0)[0])
            raise RigsideError(f"{name} must be sorted in time, got {t[first]:.6g} s before "
                               f"{t[first + 1]:.6g} s at index {first}")
    if duration_s is not None and len(t) and (t[0] < 0 or t[-1] > duration_s):
        raise RigsideError(f"{name} must lie within the recording, 0 to {duration_s:.6g} s, "
                           f"got {t[0]:.6g} to {t[-1]:.6g} s")
    return t


def same_length(n: int, **arrays) -> None:
    """Check that every named array has ``n`` rows."""
    for name, a in arrays.items():
        if a is not None and len(a) != n:
            raise RigsideError(f"{name} must have one entry per event ({n}), got {len(a)}")
