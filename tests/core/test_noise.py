import numpy as np
import pytest
from scipy import stats

from rigside.core.params import Params
from rigside.core.signal.noise import NORMAL_MAD, estimate_noise, robust_sigma

from .helpers import gaussian, write_raw


def test_constant_is_the_normal_quartile():
    # Quian Quiroga et al. 2004 use 0.6745 = Phi^-1(0.75)
    assert NORMAL_MAD == pytest.approx(stats.norm.ppf(0.75), abs=1e-15)


@pytest.mark.parametrize("n", [7, 8, 1000, 1001])
def test_fast_median_equals_numpy_median(n):
    from rigside.core.signal.noise import fast_median
    x = np.random.default_rng(n).normal(size=(3, n)).astype(np.float32)
    np.testing.assert_allclose(fast_median(x, axis=1), np.median(x, axis=1), rtol=1e-6)
    np.testing.assert_allclose(fast_median(x.T, axis=0), np.median(x, axis=1), rtol=1e-6)


@pytest.mark.parametrize("n", [7, 8, 1000])
def test_fast_median_in_place_reorders_only_the_span_it_is_given(n):
    """In place on a window's span of a channel-major pool (a strided view), as the noise estimate
    uses it: numpy's median of the span, the span's values only reordered, the rest untouched."""
    from rigside.core.signal.noise import fast_median
    pool = np.random.default_rng(n).normal(size=(3, 3 * n)).astype(np.float32)
    before = pool.copy()
    span = pool[:, n:2 * n]
    np.testing.assert_allclose(fast_median(span, axis=1, overwrite_input=True), np.median(before[:, n:2 * n], axis=1),
                               rtol=1e-6)
    np.testing.assert_array_equal(np.sort(span, axis=1), np.sort(before[:, n:2 * n], axis=1))
    np.testing.assert_array_equal(pool[:, :n], before[:, :n])
    np.testing.assert_array_equal(pool[:, 2 * n:], before[:, 2 * n:])


def test_matches_scipy_mad_on_gaussian_noise():
    x = gaussian(200000, 3, sigma=7.0, seed=5)
    # reference implementation: scipy.stats.median_abs_deviation(scale='normal');
    # it subtracts the median, ours does not: equal to ~1e-3 for zero-mean noise.
    ref = stats.median_abs_deviation(x, axis=0, scale="normal")
    np.testing.assert_allclose(robust_sigma(x), ref, rtol=2e-3)
    np.testing.assert_allclose(robust_sigma(x), 7.0, rtol=0.01)


@pytest.mark.parametrize("rate,std_want", [(20, 11.32), (50, 13.06), (100, 15.52)])
def test_robust_against_spikes_while_std_is_not(rate, std_want):
    # CHECKS.md s1 (Campbell's theorem): white noise sigma 10 uV plus a 30-sample template with
    # sum(w^2) = 42296 uV^2 at Poisson rate R: std = sqrt(100 + R/fs * 42296); the
    # median-based estimate stays near 10 uV (10.13 / 10.32 / 10.66 in CHECKS.md).
    fs, n = 30000, 3_000_000
    rng = np.random.default_rng(rate)
    w = -np.hanning(30)
    w *= np.sqrt(42296 / np.sum(w ** 2))
    x = rng.normal(0, 10, n)
    times = rng.choice(n - 30, rng.poisson(rate * n / fs), replace=False)
    for t in times:
        x[t:t + 30] += w
    assert np.std(x) == pytest.approx(std_want, rel=0.03)
    robust = robust_sigma(x[:, None])[0]
    assert abs(robust - 10.0) < 0.2 * abs(np.std(x) - 10.0)
    if rate <= 50:  # "within a few percent" of the true sigma at usual rates
        assert robust == pytest.approx(10.0, rel=0.05)


def test_windows_sample_the_whole_file(tmp_path):
    # noise 10 uV in the first half and 30 uV in the second: an estimate from the start
    # alone would say 10; windows across the file see both halves.
    a = gaussian(150000, 1, 10.0, seed=1)
    b = gaussian(150000, 1, 30.0, seed=2)
    rec = write_raw(tmp_path / "r.bin", np.concatenate([a, b]))
    est = estimate_noise(rec, Params())
    first, second = est.window_start_s < 4.7, est.window_start_s >= 5  # windows of 0.25 s
    low, high = est.window_sigma_uv[first, 0].mean(), est.window_sigma_uv[second, 0].mean()
    assert first.sum() >= 8 and second.sum() >= 8
    assert high / low == pytest.approx(3.0, rel=0.05)
    assert low * 1.2 < est.sigma_uv[0] < high / 1.2


def test_dead_noisy_and_saturated_channels_are_flagged(tmp_path):
    x = gaussian(60000, 4, 10.0, seed=3)
    x[:, 1] = 0.0
    x[:, 2] *= 20
    x[:, 3] = np.clip(x[:, 3] * 30, -50, 50)
    rec = write_raw(tmp_path / "r.bin", x)
    est = estimate_noise(rec, Params())
    assert est.sigma_uv[1] == 0.0
    assert est.bad == {1: "dead", 2: "noisy", 3: "saturated"}


def test_cancel_stops_the_estimate(tmp_path):
    from rigside.core.progress import Cancelled
    rec = write_raw(tmp_path / "r.bin", gaussian(60000, 2))
    with pytest.raises(Cancelled):
        estimate_noise(rec, Params(), cancel=lambda: True)
