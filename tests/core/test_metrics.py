"""Quality metrics against worked examples (CHECKS.md sections 4, 6, 8) and simulations."""

import math

import numpy as np
import pytest
from scipy import optimize, stats

from rigside.core.errors import ParamError, RigsideError
from rigside.core.quality.metrics import (
    amplitude_drift,
    cv_isi,
    fano_factor,
    firing_rate,
    isi_violations,
    missed_fraction,
    presence_ratio,
    snr,
    snr_peak_to_peak,
)


def train_with_violations(n, duration, r, gap):
    """n spikes spread over ``duration`` with exactly ``r`` intervals of ``gap`` seconds."""
    t = np.arange(n) * (duration / n)
    pairs = np.arange(r) * 10 + 5
    t[pairs + 1] = t[pairs] + gap
    return t


def hill(r, n, duration, tau_r, tau_c):
    """Hill, Mehta & Kleinfeld 2011 [memory]: f = 1/2 - sqrt(1/4 - r T / (2 (tau_R - tau_C) N^2))."""
    return 0.5 - math.sqrt(0.25 - r * duration / (2 * (tau_r - tau_c) * n * n))


def hill_poisson(r, n, duration, tau_r, tau_c):
    """Random-contamination form [memory]: f = 1 - sqrt(1 - r T / ((tau_R - tau_C) N^2))."""
    return 1 - math.sqrt(1 - r * duration / ((tau_r - tau_c) * n * n))


# ---- section 4: refractory violations (Hill, Mehta & Kleinfeld 2011) [memory] -------------
@pytest.mark.parametrize("r, tau_c, f_hill, f_poisson", [
    (9, 0.0, 0.1, 0.094461),       # CHECKS.md section 4 worked example
    (12, 0.0005, 0.2, 0.175379),   # CHECKS.md section 4 worked example
])
def test_hill_worked_examples(r, tau_c, f_hill, f_poisson):
    t = train_with_violations(5000, 1000.0, r, gap=0.001)
    res = isi_violations(t, 1000.0, refractory_s=0.002, censored_s=tau_c)
    assert res.n_violations == r
    # Hill et al. 2011 [memory], formula and the CHECKS.md value
    assert res.contamination == pytest.approx(hill(r, 5000, 1000.0, 0.002, tau_c), rel=1e-12)
    assert res.contamination == pytest.approx(f_hill, abs=1e-12)
    assert res.contamination_poisson == pytest.approx(hill_poisson(r, 5000, 1000.0, 0.002, tau_c), rel=1e-12)
    assert res.contamination_poisson == pytest.approx(f_poisson, abs=1e-6)
    assert res.reason == "" and res.reason_poisson == ""


def test_hill_no_real_root_is_nan_with_reason():
    # CHECKS.md section 4: r = 19, tau_C = 0.5 ms has no root; the largest r with one is 18.75
    t = train_with_violations(5000, 1000.0, 19, gap=0.001)
    res = isi_violations(t, 1000.0, refractory_s=0.002, censored_s=0.0005)
    assert res.n_violations == 19
    assert math.isnan(res.contamination)
    assert "no real root" in res.reason and "18.75" in res.reason
    # the random-contamination form still has a root (r T / ((tau_R - tau_C) N^2) < 1)
    assert res.contamination_poisson == pytest.approx(hill_poisson(19, 5000, 1000.0, 0.002, 0.0005))


def test_violation_counting_example():
    # CHECKS.md section 4 counting example
    t = np.array([0, 0.4, 1.5, 10.0, 11.9, 30.0]) / 1e3
    assert isi_violations(t, 1.0, refractory_s=0.002).n_violations == 3
    assert isi_violations(t, 1.0, refractory_s=0.002, censored_s=0.0005).n_violations == 2


def dead_time_poisson(rng, rate_obs, dead, duration):
    """Poisson train with dead time: intervals d + Exp(lam), observed rate lam / (1 + lam d)."""
    lam = rate_obs / (1 - rate_obs * dead)
    isi = dead + rng.exponential(1 / lam, int(duration * rate_obs * 1.1) + 100)
    t = np.cumsum(isi)
    return t[t < duration]


def test_refractory_train_has_no_violations():
    # simulation ground truth: dead time 2 ms > refractory 1.5 ms
    t = dead_time_poisson(np.random.default_rng(1), 30.0, 0.002, 500.0)
    res = isi_violations(t, 500.0)
    assert res.n_violations == 0 and res.contamination == 0.0 and res.contamination_poisson == 0.0


def test_random_contamination_recovered_by_poisson_form():
    # simulation ground truth: a refractory train plus a known fraction (0.1) of random spikes
    rng = np.random.default_rng(2)
    duration, f = 2000.0, 0.1
    own = dead_time_poisson(rng, 20.0, 0.0025, duration)
    extra = np.sort(rng.uniform(0, duration, int(round(len(own) * f / (1 - f)))))
    t = np.sort(np.concatenate([own, extra]))
    res = isi_violations(t, duration)
    assert res.contamination_poisson == pytest.approx(f, abs=0.02)


def test_refractory_contamination_recovered_by_hill_form():
    # simulation ground truth: 20 % of the spikes come from one other refractory neuron
    rng = np.random.default_rng(3)
    duration = 2000.0
    a = dead_time_poisson(rng, 20.0, 0.0025, duration)
    b = dead_time_poisson(rng, 5.0, 0.0025, duration)
    t = np.sort(np.concatenate([a, b]))
    res = isi_violations(t, duration)
    assert res.contamination == pytest.approx(len(b) / len(t), abs=0.03)


def test_too_few_spikes_is_nan_with_reason():
    for t in (np.array([]), np.array([0.5])):
        res = isi_violations(t, 10.0)
        assert math.isnan(res.contamination) and "at least 2 spikes" in res.reason
        assert math.isnan(res.contamination_poisson) and res.reason_poisson


def test_isi_bad_input():
    with pytest.raises(RigsideError, match="sorted"):
        isi_violations([0.0, 0.3, 0.2], 1.0)
    with pytest.raises(RigsideError, match="finite"):
        isi_violations([0.0, np.nan], 1.0)
    with pytest.raises(RigsideError, match="within the recording"):
        isi_violations([0.0, 2.0], 1.0)
    with pytest.raises(RigsideError, match="1-D"):
        isi_violations(np.zeros((2, 2)), 1.0)
    with pytest.raises(ParamError, match="censored period must be shorter"):
        isi_violations([0.0, 0.1], 1.0, refractory_s=0.001, censored_s=0.002)
    with pytest.raises(ParamError, match="recording duration"):
        isi_violations([0.0, 0.1], -1.0)


# ---- section 8: spike-train statistics (Cox 1962, Renewal Theory) [memory] ----------------
def test_cv_and_fano_of_dead_time_poisson():
    # CHECKS.md section 8: r = 20 Hz, d = 2 ms -> CV = 1 - r d = 0.96, FF -> CV^2 = 0.9216
    duration = 100000.0
    t = dead_time_poisson(np.random.default_rng(4), 20.0, 0.002, duration)
    cv = cv_isi(t)
    assert cv.value == pytest.approx(1 - 20.0 * 0.002, abs=0.005)
    ff = fano_factor(t, duration, window_s=5.0)
    assert ff.value == pytest.approx((1 - 20.0 * 0.002) ** 2, abs=0.03)
    assert firing_rate(t, duration) == pytest.approx(20.0, rel=0.01)


def test_cv_and_fano_of_poisson_are_one():
    # CHECKS.md section 8: homogeneous Poisson CV = 1, FF = 1
    rng = np.random.default_rng(5)
    t = np.sort(rng.uniform(0, 20000.0, 200000))
    assert cv_isi(t).value == pytest.approx(1.0, abs=0.01)
    assert fano_factor(t, 20000.0, 2.0).value == pytest.approx(1.0, abs=0.04)


def test_train_statistics_undefined():
    assert "at least 3 spikes" in cv_isi([0.1, 0.2]).reason
    assert math.isnan(cv_isi([0.1, 0.2]).value)
    assert "2 whole windows" in fano_factor([0.1], 1.5, 1.0).reason
    assert "no spikes" in fano_factor([], 10.0, 1.0).reason


# ---- presence, drift, SNR ----------------------------------------------------------------
def test_presence_ratio():
    # common practice, no source: a unit silent in the second half is present in half the bins
    t = np.sort(np.random.default_rng(6).uniform(0, 300.0, 3000))
    assert presence_ratio(t, 600.0, bin_s=60.0).value == pytest.approx(0.5)
    assert presence_ratio(t, 300.0).value == 1.0
    # a 30 s recording still gets 10 bins of 3 s: a spike in [0, 3) only covers one
    assert presence_ratio([1.0, 2.0], 30.0).value == pytest.approx(0.1)
    assert presence_ratio([], 30.0).value == 0.0
    assert presence_ratio([30.0], 30.0).value == pytest.approx(0.1)


def test_amplitude_drift_exact_line():
    # least squares of an exact line: -100 uV to -80 uV over 10 minutes
    t = np.linspace(0, 600.0, 101)
    a = -100 + 20 * t / 600.0
    d = amplitude_drift(t, a)
    assert d.slope_uv_per_min == pytest.approx(2.0)
    assert d.relative_change == pytest.approx(20 / -90)   # magnitude shrank by 20 uV of a mean 90 uV
    assert d.reason == ""


def test_amplitude_drift_undefined_and_bad_input():
    assert "at least 3 spikes" in amplitude_drift([1.0, 2.0], [3.0, 4.0]).reason
    assert "one time" in amplitude_drift([1.0, 1.0, 1.0], [3.0, 4.0, 5.0]).reason
    assert math.isnan(amplitude_drift([0.0, 1, 2], [-1.0, 0, 1]).relative_change)
    with pytest.raises(RigsideError, match="one entry per event"):
        amplitude_drift([0.0, 1.0, 2.0], [1.0, 2.0])


def test_snr_definitions():
    # our definition (common practice, no source): mean |peak| / channel sigma
    assert snr([-50.0, -70.0, 60.0], 10.0).value == pytest.approx(6.0)
    assert "dead channel" in snr([-50.0], 0.0).reason
    assert "no events" in snr([], 10.0).reason
    # Suner et al. 2005; Kelly et al. 2007 [formula from memory]: peak-to-peak / (2 SD residuals)
    w = np.array([0.0, -80.0, 40.0, 0.0])
    assert snr_peak_to_peak(w, 6.0).value == pytest.approx(120.0 / 12.0)
    assert "residual SD is 0" in snr_peak_to_peak(w, 0.0).reason
    with pytest.raises(ParamError):
        snr([-50.0], -1.0)


# ---- section 6: missed spikes from the amplitude distribution (after Hill et al. 2011) [memory]
def cut_normal_sample(n, mu, sd, theta):
    """Deterministic sample: quantiles of N(mu, sd^2) cut at theta (scipy.stats.truncnorm)."""
    q = (np.arange(n) + 0.5) / n
    return stats.truncnorm.ppf(q, (theta - mu) / sd, np.inf, loc=mu, scale=sd)


def test_missed_fraction_check_value():
    # CHECKS.md section 6: N(100, 20^2) cut at 80 -> Phi(-1) = 0.158655; a large sample fits 0.1585
    x = cut_normal_sample(100000, 100.0, 20.0, 80.0)
    res = missed_fraction(x, 80.0)
    assert res.value == pytest.approx(stats.norm.cdf(-1.0), abs=5e-4)
    assert res.mean == pytest.approx(100.0, abs=0.1) and res.sd == pytest.approx(20.0, abs=0.1)
    # the naive untruncated fit gives ~0.05, the bias the cut fit avoids
    naive = stats.norm.cdf((80.0 - x.mean()) / x.std())
    assert naive == pytest.approx(0.05, abs=0.01)
    # negative spikes: magnitudes are used
    assert missed_fraction(-x, -80.0).value == pytest.approx(res.value, rel=1e-12)


def test_missed_fraction_is_the_maximum_likelihood_fit():
    # reference: numeric maximisation of scipy.stats.truncnorm log-likelihood
    rng = np.random.default_rng(7)
    x = rng.normal(60.0, 15.0, 20000)
    x = x[x >= 55.0][:3000]

    def nll(p):
        mu, log_sd = p
        sd = math.exp(log_sd)
        return -stats.truncnorm.logpdf(x, (55.0 - mu) / sd, np.inf, loc=mu, scale=sd).sum()

    fit = optimize.minimize(nll, [x.mean(), math.log(x.std())], method="Nelder-Mead",
                            options={"xatol": 1e-8, "fatol": 1e-10, "maxiter": 5000})
    mu, sd = fit.x[0], math.exp(fit.x[1])
    res = missed_fraction(x, 55.0)
    assert res.mean == pytest.approx(mu, rel=1e-4) and res.sd == pytest.approx(sd, rel=1e-4)
    assert res.value == pytest.approx(stats.norm.cdf((55.0 - mu) / sd), abs=1e-4)
    assert res.value == pytest.approx(stats.norm.cdf((55.0 - 60.0) / 15.0), abs=0.05)


def test_missed_fraction_undefined_cases():
    x = cut_normal_sample(1000, 100.0, 20.0, 80.0)
    assert "at least 20 events" in missed_fraction(x[:10], 80.0).reason
    below = missed_fraction(np.append(x, 70.0), 80.0)
    assert math.isnan(below.value) and "below the threshold" in below.reason
    # exponential excess: SD equals the mean excess, no cut Gaussian fits
    wide = 80.0 + np.random.default_rng(8).exponential(10.0, 5000) * 1.2
    wide_res = missed_fraction(wide, 80.0)
    assert math.isnan(wide_res.value) and wide_res.reason
    assert "no spread" in missed_fraction(np.full(50, 90.0), 80.0).reason
    with pytest.raises(RigsideError, match="finite"):
        missed_fraction(np.append(x, np.nan), 80.0)


def test_cut_position_equals_scipy_brentq():
    # the missed-fraction fit's root, found by bisection, against scipy.optimize.brentq on the same
    # equation (near the largest cut the ratio is flat, so the roots agree to 1e-8, not 1e-12)
    from rigside.core.quality.metrics import _A_MAX, _cut_position, _excess_ratio
    for ratio in np.geomspace(1e-4, 0.999 * _excess_ratio(_A_MAX), 60):
        lo = -(2.0 / math.sqrt(ratio) + 10.0)
        want = optimize.brentq(lambda c, r=ratio: _excess_ratio(c) - r, lo, _A_MAX, xtol=1e-12, rtol=1e-14)
        assert _cut_position(ratio, lo) == pytest.approx(want, abs=1e-8)
