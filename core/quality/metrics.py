"""Per-unit quality metrics: refractory violations, contamination, isolation, SNR, missed
spikes, presence, amplitude drift and spike-train statistics.

Every metric here is an estimate under assumptions (Gaussian clusters, a refractory period,
a stationary recording); each docstring names its own. Undefined results are NaN with a
reason (:class:`MetricValue` or a result dataclass with a ``reason`` field), never an
exception; bad input raises a :class:`~rigside.core.errors.RigsideError` subclass.

Times are in seconds, measured from the start of the recording; amplitudes in microvolts.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from rigside.core.errors import ParamError
from rigside.core.quality.metric_inputs import MetricValue, float_1d, positive, same_length, spike_times, undefined
from rigside.core.quality.separation import Separation, cluster_separation, isolation_distance, l_ratio

__all__ = [
    "MetricValue", "Separation", "IsiViolations", "AmplitudeDrift", "MissedFraction",
    "isi_violations", "isolation_distance", "l_ratio", "cluster_separation", "missed_fraction",
    "presence_ratio", "amplitude_drift", "snr", "snr_peak_to_peak", "firing_rate", "cv_isi",
    "fano_factor",
]


# ---- refractory violations --------------------------------------------------------------
@dataclass(frozen=True)
class IsiViolations:
    """Refractory-period violations of one spike train and the contamination they imply.

    Attributes
    ----------
    n_violations
        Number of inter-spike intervals in [censored_s, refractory_s).
    n_spikes, refractory_s, censored_s, duration_s
        The inputs the estimate rests on.
    contamination
        Hill, Mehta & Kleinfeld 2011 estimate of the fraction of spikes from elsewhere,
        assuming those spikes come from one other refractory neuron; NaN when undefined.
    contamination_poisson
        The same estimate assuming the contaminating spikes are random (Poisson), which adds
        the violations among contaminating spikes themselves; NaN when undefined.
    reason, reason_poisson
        Empty when the matching estimate is defined, else why not.
    """

    n_violations: int
    n_spikes: int
    refractory_s: float
    censored_s: float
    duration_s: float
    contamination: float
    contamination_poisson: float
    reason: str = ""
    reason_poisson: str = ""


def isi_violations(spike_times_s: np.ndarray, duration_s: float, refractory_s: float = 0.0015,
                   censored_s: float = 0.0) -> IsiViolations:
    """Count refractory violations and estimate contamination (Hill, Mehta & Kleinfeld 2011).

    With r violations (intervals between consecutive spikes in [tau_C, tau_R)), N spikes,
    recording length T and f the fraction of spikes from elsewhere, the expected count is
    r = 2 (tau_R - tau_C) N^2 f (1 - f) / T when the contaminating spikes come from one other
    refractory neuron, solved as f = 1/2 - sqrt(1/4 - r T / (2 (tau_R - tau_C) N^2)). For
    random (Poisson) contamination r = 2 (tau_R - tau_C) N^2 f (1 - f/2) / T, solved as
    f = 1 - sqrt(1 - r T / ((tau_R - tau_C) N^2)). Both assume a stationary rate.

    Parameters
    ----------
    spike_times_s
        Sorted spike times of one unit (s), within [0, duration_s].
    duration_s
        Recording length T (s).
    refractory_s
        Refractory period tau_R (s), default 1.5 ms.
    censored_s
        Censored period tau_C (s) after each spike during which no second spike could be
        detected (e.g. the detector's dead time), default 0.

    Returns
    -------
    IsiViolations
        Counts and both estimates; an estimate is NaN with a reason when the train has fewer
        than 2 spikes or the equation has no real root (more violations than the model allows).
    """
    duration_s = positive("recording duration", duration_s)
    refractory_s = positive("refractory period", refractory_s)
    censored_s = positive("censored period", censored_s, allow_zero=True)
    if censored_s >= refractory_s:
        raise ParamError(f"censored period must be shorter than the refractory period "
                         f"({refractory_s * 1e3:g} ms), got {censored_s * 1e3:g} ms")
    t = spike_times(spike_times_s, duration_s)
    n = len(t)
    isi = np.diff(t)
    r = int(np.count_nonzero((isi >= censored_s) & (isi < refractory_s)))
    args = (r, n, refractory_s, censored_s, duration_s)
    if n < 2:
        why = f"needs at least 2 spikes, got {n}"
        return IsiViolations(*args, math.nan, math.nan, why, why)
    x = r * duration_s / ((refractory_s - censored_s) * n * n)
    if x / 2 <= 0.25:
        f_hill, why_hill = 0.5 - math.sqrt(0.25 - x / 2), ""
    else:
        most = (refractory_s - censored_s) * n * n / (2 * duration_s)
        f_hill, why_hill = math.nan, (f"no real root: {r} violations exceed the {most:.4g} that a "
                                      f"refractory contaminating neuron can produce at any fraction")
    if x <= 1:
        f_pois, why_pois = 1 - math.sqrt(1 - x), ""
    else:
        most = (refractory_s - censored_s) * n * n / duration_s
        f_pois, why_pois = math.nan, (f"no real root: {r} violations exceed the {most:.4g} that random "
                                      f"contaminating spikes can produce at any fraction")
    return IsiViolations(*args, f_hill, f_pois, why_hill, why_pois)


# ---- spike-train statistics -------------------------------------------------------------
def firing_rate(spike_times_s: np.ndarray, duration_s: float) -> float:
    """Mean firing rate (Hz): spike count over recording length."""
    duration_s = positive("recording duration", duration_s)
    return len(spike_times(spike_times_s, duration_s)) / duration_s


def cv_isi(spike_times_s: np.ndarray) -> MetricValue:
    """Coefficient of variation of the inter-spike intervals, SD(ISI) / mean(ISI).

    The SD uses the n - 1 normalisation. A Poisson train gives 1; a Poisson train with dead
    time d at observed rate r gives 1 - r d (Cox 1962). NaN with a reason below 3 spikes.
    """
    t = spike_times(spike_times_s)
    if len(t) < 3:
        return undefined(f"needs at least 3 spikes, got {len(t)}")
    isi = np.diff(t)
    mean = isi.mean()
    if mean <= 0:
        return undefined("all spikes share one time")
    return MetricValue(float(isi.std(ddof=1) / mean))


def fano_factor(spike_times_s: np.ndarray, duration_s: float, window_s: float = 1.0) -> MetricValue:
    """Fano factor Var(count) / mean(count) over consecutive windows from time 0.

    Only whole windows inside the recording count; the variance uses n - 1. A Poisson train
    gives 1. NaN with a reason when fewer than 2 windows fit or no spike falls in them.
    """
    duration_s = positive("recording duration", duration_s)
    window_s = positive("count window", window_s)
    t = spike_times(spike_times_s, duration_s)
    n_win = int(duration_s // window_s)
    if n_win < 2:
        return undefined(f"needs at least 2 whole windows of {window_s:g} s, got {n_win}")
    counts = np.bincount((t[t < n_win * window_s] // window_s).astype(np.int64), minlength=n_win)
    if counts.sum() == 0:
        return undefined("no spikes fall in the count windows")
    return MetricValue(float(counts[:n_win].var(ddof=1) / counts[:n_win].mean()))


def presence_ratio(spike_times_s: np.ndarray, duration_s: float, bin_s: float = 60.0,
                   min_bins: int = 10) -> MetricValue:
    """Fraction of equal time bins across the recording that hold at least one spike.

    The recording [0, duration_s] is cut into max(floor(duration_s / bin_s), min_bins) bins of
    equal width, so a recording shorter than ``min_bins`` bins of ``bin_s`` still gets
    ``min_bins`` (narrower) bins and the ratio keeps a useful resolution. Common practice,
    no source. A value well below 1 means the unit drifted in or out, or fell silent.
    """
    duration_s = positive("recording duration", duration_s)
    bin_s = positive("presence bin", bin_s)
    if not isinstance(min_bins, int) or min_bins < 1:
        raise ParamError(f"minimum bin count must be an integer of at least 1, got {min_bins!r}")
    t = spike_times(spike_times_s, duration_s)
    n_bins = max(int(duration_s // bin_s), min_bins)
    idx = np.minimum((t * (n_bins / duration_s)).astype(np.int64), n_bins - 1)
    return MetricValue(float(np.unique(idx).size / n_bins))


# ---- amplitudes -------------------------------------------------------------------------
@dataclass(frozen=True)
class AmplitudeDrift:
    """Least-squares line through amplitude over time.

    Attributes
    ----------
    slope_uv_per_min
        Slope of the signed amplitude (uV per minute).
    relative_change
        Change of the amplitude magnitude along the fitted line from the first to the last
        spike, as a fraction of the mean amplitude (negative: the unit shrank).
    reason
        Empty when defined, else why not.
    """

    slope_uv_per_min: float
    relative_change: float
    reason: str = ""


def amplitude_drift(spike_times_s: np.ndarray, amplitudes_uv: np.ndarray) -> AmplitudeDrift:
    """Amplitude drift of one unit: least-squares slope and relative change over the session.

    Parameters
    ----------
    spike_times_s
        Sorted spike times (s).
    amplitudes_uv
        Signed peak amplitude of each spike (uV).

    Returns
    -------
    AmplitudeDrift
        NaN with a reason below 3 spikes, when all spikes share one time, or (relative
        change only) when the mean amplitude is 0.
    """
    t = spike_times(spike_times_s)
    a = float_1d(amplitudes_uv, "amplitudes")
    same_length(len(t), amplitudes=a)
    if len(t) < 3:
        why = f"needs at least 3 spikes, got {len(t)}"
        return AmplitudeDrift(math.nan, math.nan, why)
    minutes = (t - t.mean()) / 60.0
    sxx = float(minutes @ minutes)
    if sxx == 0:
        return AmplitudeDrift(math.nan, math.nan, "all spikes share one time")
    slope = float(minutes @ (a - a.mean()) / sxx)
    mean = float(a.mean())
    if mean == 0:
        return AmplitudeDrift(slope, math.nan, "the mean amplitude is 0")
    return AmplitudeDrift(slope, slope * (t[-1] - t[0]) / 60.0 / mean)


def snr(amplitudes_uv: np.ndarray, sigma_uv: float) -> MetricValue:
    """Signal-to-noise ratio: mean absolute peak amplitude of the unit's events on their
    detection channel divided by that channel's robust noise sigma (common practice, no
    source; sigma = median(|x|)/0.6745, Quian Quiroga et al. 2004).

    NaN with a reason when there are no amplitudes or the channel's sigma is 0.
    """
    return _size_over_noise(amplitudes_uv, "amplitudes", lambda a: np.abs(a).mean(), "the unit has no events",
                            sigma_uv, "channel noise sigma", "the channel's noise sigma is 0 (dead channel)")


def snr_peak_to_peak(mean_waveform: np.ndarray, residual_sd: float) -> MetricValue:
    """Peak-to-peak amplitude of the mean waveform over twice the SD of the residuals
    (Suner et al. 2005; Kelly et al. 2007 [formula from memory]).

    ``residual_sd`` is the SD of all samples of the unit's waveforms minus the mean waveform
    (same channel, same units). NaN with a reason when it is 0 or the waveform is empty.
    """
    return _size_over_noise(mean_waveform, "mean waveform", lambda w: (w.max() - w.min()) / 2,
                            "the mean waveform is empty", residual_sd, "residual SD", "the residual SD is 0")


def _size_over_noise(values, name: str, size: Callable[[np.ndarray], float], why_empty: str, noise,
                     noise_name: str, why_zero: str) -> MetricValue:
    """``size(values) / noise`` (values checked as 1-D, noise as at least 0 uV), undefined with
    ``why_empty`` when there are no values and with ``why_zero`` when the noise is 0."""
    v = float_1d(values, name)
    n = positive(noise_name, noise, unit="uV", allow_zero=True)
    if len(v) == 0:
        return undefined(why_empty)
    if n == 0:
        return undefined(why_zero)
    return MetricValue(float(size(v) / n))


@dataclass(frozen=True)
class MissedFraction(MetricValue):
    """Missed fraction with the fitted Gaussian (``mean``, ``sd`` of the amplitude magnitudes,
    in the units of the amplitudes given; NaN when no fit)."""

    mean: float = math.nan
    sd: float = math.nan


def _mills(a: float) -> float:
    """phi(a) / (1 - Phi(a)), computed in logs."""
    from scipy.special import log_ndtr  # imported on use: scipy is not loaded at start-up
    return math.exp(-0.5 * a * a - 0.5 * math.log(2 * math.pi) - float(log_ndtr(-a)))


def _excess_ratio(a: float) -> float:
    """Var / mean^2 of (X - theta) for a normal cut at theta = mu + a sigma."""
    lam = _mills(a)
    return (1 + a * lam - lam * lam) / (lam - a) ** 2


_A_MAX = 8.0
"""Largest cut position fitted, in SD above the mean: a missed fraction of 1 - 6e-16."""


def _cut_position(ratio: float, lo: float) -> float:
    """The cut position ``a`` in ``[lo, _A_MAX]`` where :func:`_excess_ratio` (increasing in ``a``)
    equals ``ratio``, by bisection to 1e-12 (as ``scipy.optimize.brentq`` would give it, without the
    second of importing scipy.optimize into every window and command)."""
    a, b = lo, _A_MAX
    while b - a > 1e-12 + 1e-14 * abs(a):
        mid = 0.5 * (a + b)
        if _excess_ratio(mid) < ratio:
            a = mid
        else:
            b = mid
    return 0.5 * (a + b)


def missed_fraction(amplitudes: np.ndarray, threshold: float, min_events: int = 20) -> MissedFraction:
    """Fraction of a unit's spikes estimated lost below the detection threshold.

    The magnitudes of the detected amplitudes are modelled as a Gaussian cut at the threshold
    magnitude (after Hill et al. 2011 [memory]); the missed fraction is Phi((theta - mu) / sigma).
    The fit is the maximum-likelihood fit of the cut Gaussian. The cut Gaussian is an
    exponential family in (x, x^2), so the fit matches the mean and variance of the excess
    x - theta; that reduces to one equation in the cut position, solved by bracketing.

    Parameters
    ----------
    amplitudes
        Peak amplitudes of one unit's events (signed or magnitudes; magnitudes are used).
    threshold
        Detection threshold in the same units (its magnitude is used).
    min_events
        Fewest events for a fit.

    Returns
    -------
    MissedFraction
        NaN with a reason for too few events, amplitudes below the threshold, no spread, or
        a spread too wide for any cut Gaussian (SD of the excess at least its mean: the
        likelihood grows without bound as the Gaussian moves down), or a fitted mean
        magnitude at or below 0 (no Gaussian peak in the data).
    """
    a = np.abs(float_1d(amplitudes, "amplitudes"))
    theta = abs(float(threshold))
    if not math.isfinite(theta):
        raise ParamError(f"threshold must be a finite number, got {threshold!r}")
    if len(a) < min_events:
        return MissedFraction(math.nan, f"needs at least {min_events} events, got {len(a)}")
    low = a < theta * (1 - 1e-6)
    if np.any(low):
        return MissedFraction(math.nan, f"{int(low.sum())} amplitudes lie below the threshold "
                                        f"{theta:.4g}; the cut must be at or below every amplitude")
    z = np.maximum(a - theta, 0.0)
    m, v = float(z.mean()), float(z.var())
    if m == 0 or v == 0:
        return MissedFraction(math.nan, "the amplitudes have no spread above the threshold")
    ratio = v / (m * m)
    if ratio >= _excess_ratio(_A_MAX):
        return MissedFraction(math.nan, f"amplitudes spread too widely above the threshold for a "
                                        f"cut Gaussian (SD {math.sqrt(v):.4g} vs mean excess {m:.4g})")
    lo = -(2.0 / math.sqrt(ratio) + 10.0)
    cut = _cut_position(ratio, lo)
    sd = m / (_mills(cut) - cut)
    mean = theta - cut * sd
    if mean <= 0:
        return MissedFraction(math.nan, f"the fitted Gaussian has a mean magnitude of {mean:.4g}, at "
                                        f"or below 0: the amplitudes show no Gaussian peak to fit")
    from scipy.special import ndtr  # imported on use: scipy is not loaded at start-up
    return MissedFraction(float(ndtr(cut)), "", mean, sd)
