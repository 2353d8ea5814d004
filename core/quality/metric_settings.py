"""The one censored-period rule of the quality metrics, and the sentence every output carries about it.

Pure Python (no NumPy): the command line reads it at import time.
"""

from __future__ import annotations

from dataclasses import replace

from rigside.core.numbers import format_number
from rigside.core.params import MetricParams, Params


def metric_settings(params: Params, censored_ms: float | None = None) -> MetricParams:
    """The metric settings every command and the window use, with the one censored-period rule.

    The censored period is ``censored_ms`` when given; otherwise ``params.metrics.censored_ms``
    when set (above 0); otherwise the detection dead time, since intervals shorter than it cannot
    be seen (kept below the refractory period).

    Parameters
    ----------
    params
        All parameters (``metrics`` and ``detect.dead_time_ms`` are used).
    censored_ms
        An explicit censored period (e.g. from the command line); 0 is then taken as 0.

    Returns
    -------
    MetricParams
        A validated copy.
    """
    mp = replace(params.metrics)
    if censored_ms is not None:
        mp.censored_ms = censored_ms
    elif mp.censored_ms == 0.0:
        mp.censored_ms = min(params.detect.dead_time_ms, 0.99 * mp.refractory_ms)
    mp.validate()
    return mp


def censored_note(mp: MetricParams) -> str:
    """The sentence every output carries about the censored period used."""
    return (f"censored period {format_number(mp.censored_ms)} ms (the detection dead time unless set); "
            f"refractory period {format_number(mp.refractory_ms)} ms")
