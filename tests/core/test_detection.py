import numpy as np
import pytest
from scipy import signal

from rigside.core.events import EventTable
from rigside.core.params import Params
from rigside.core.signal.filtering import design_bandpass
from rigside.core.signal.pipeline import detect
from rigside.core.signal.rice import sampled_crossing_rate

from .helpers import gaussian, write_raw

FS = 30000.0


@pytest.fixture(scope="module")
def noise_recording(tmp_path_factory):
    # 16 independent channels of white Gaussian noise, 40 s: 640 channel-seconds
    path = tmp_path_factory.mktemp("noise") / "noise.bin"
    return write_raw(path, gaussian(int(40 * FS), 16, sigma=20.0, seed=11), groups=[[c] for c in range(16)])


def test_false_crossings_match_sampled_rice_rate(noise_recording):
    # Rice 1944/45 in its sampled-data form (CHECKS.md s3): expected downward crossings of
    # -k sigma per second per channel = fs [Phi(-k) - Phi2(-k,-k; rho1)] for the filter used.
    # Counts are Poisson: accept within 4 standard deviations of the expected count.
    # The threshold is k times the *estimated* sigma; the expected rate is evaluated at the
    # level this is in units of the true filtered sigma (Parseval: white sigma times the
    # root of the integral of |H|^4 over 0..fs/2, divided by fs/2), so the check tests the
    # detector, not the sampling error of the noise estimate.
    params = Params()
    params.detect.floor_sigma = 3.0
    ev = detect(noise_recording, params)
    sos = design_bandpass(params.filter, FS)
    f, h = signal.sosfreqz(sos, worN=1 << 16, fs=FS)
    true_sigma = 20.0 * np.sqrt(np.trapezoid(np.abs(h) ** 4, f) / (FS / 2))
    assert ev.sigma_uv.mean() == pytest.approx(true_sigma, rel=0.005)
    for k in (3.0, 3.5, 4.0, 4.5):
        levels = k * ev.sigma_uv / true_sigma
        expected = float(np.sum(sampled_crossing_rate(sos, FS, levels))) * noise_recording.duration_s
        got = int(ev.counts(threshold_sigma=k).sum())
        assert abs(got - expected) < 4 * np.sqrt(expected) + 1, (k, got, expected)


def test_counts_fall_monotonically(noise_recording):
    params = Params()
    params.detect.floor_sigma = 3.0
    ev = detect(noise_recording, params)
    curve = ev.count_curve(0, np.linspace(3, 6, 61))
    assert np.all(np.diff(curve) <= 0) and curve[0] > curve[-1]


def spiky(tmp_path, seed=0):
    """Noise plus negative spikes shared across a 4-channel group (invented ground truth)."""
    rng = np.random.default_rng(seed)
    x = gaussian(int(6 * FS), 8, sigma=10.0, seed=seed + 100)
    t = np.sort(rng.choice(np.arange(100, len(x) - 100, 200), 300, replace=False))
    amps = rng.uniform(30, 200, len(t))
    w = -np.hanning(20)
    for ti, a in zip(t, amps):
        x[ti - 10:ti + 10, 0:4] += (w[:, None] * a * np.array([1.0, 0.6, 0.4, 0.2])).astype(np.float32)
    return write_raw(tmp_path / "s.bin", x, groups=[[0, 1, 2, 3], [4, 5, 6, 7]]), t, amps


@pytest.mark.parametrize("mode", ["sigma", "uv"])
def test_look_up_equals_fresh_detection(tmp_path, mode):
    rec, _, _ = spiky(tmp_path)
    low = Params()
    low.detect.floor_sigma = 3.0
    table = detect(rec, low)
    for k in (3.5, 4.5, 6.0, 9.0):
        fresh_p = Params()
        if mode == "sigma":
            fresh_p.detect.threshold_sigma = k
            keep = table.mask(threshold_sigma=k)
        else:
            fresh_p.detect.threshold_uv = k * 10.0
            keep = table.mask(threshold_uv=k * 10.0)
        fresh = detect(rec, fresh_p)
        fresh_keep = fresh.mask(threshold_sigma=k) if mode == "sigma" else fresh.mask(threshold_uv=k * 10.0)
        np.testing.assert_array_equal(table.sample[keep], fresh.sample[fresh_keep])
        np.testing.assert_array_equal(table.channel[keep], fresh.channel[fresh_keep])
        given = {"threshold_sigma": k} if mode == "sigma" else {"threshold_uv": k * 10.0}
        assert table.counts(**given).sum() == keep.sum()


def test_result_does_not_depend_on_chunking_or_threads(tmp_path):
    rec, _, _ = spiky(tmp_path)
    a, b = Params(), Params()
    b.run.chunk_s, b.run.workers = 0.05, 1
    ea, eb = detect(rec, a), detect(rec, b)
    np.testing.assert_array_equal(ea.sample, eb.sample)
    # filter margins differ between chunkings: amplitudes agree to float32 rounding
    np.testing.assert_allclose(ea.amplitude_uv, eb.amplitude_uv, rtol=1e-4, atol=1e-3)


def test_one_event_per_spike_per_group_at_the_peak(tmp_path):
    rec, t, amps = spiky(tmp_path)
    ev = detect(rec, Params())
    keep = ev.mask(threshold_sigma=4.5) & (ev.group == 0)
    # spikes are 200+ samples apart: each large one is found once, on channel 0 (the largest),
    # at its trough
    found = ev.sample[keep]
    dist = np.abs(found[:, None] - t[None, :])
    near = dist.min(axis=1) <= 2
    big = amps[dist.argmin(axis=1)] >= 100
    assert np.all(ev.channel[keep][near & big] == 0)
    assert (near & big).sum() == (amps >= 100).sum()
    found = found[near]
    # no spike found twice: matched one-to-one
    assert len(np.unique(np.abs(found[:, None] - t[None, :]).argmin(axis=1))) == len(found)


def test_dead_time_merges_close_peaks(tmp_path):
    x = gaussian(30000, 1, sigma=1.0, seed=3)
    x[10000, 0] -= 30
    x[10020, 0] -= 20  # 0.67 ms later: inside a 1 ms dead time
    x[10100, 0] -= 25  # 3.3 ms later: outside
    rec = write_raw(tmp_path / "d.bin", x)
    p = Params()
    p.filter.low_hz, p.filter.high_hz = 100.0, 14000.0
    ev = detect(rec, p)
    s = ev.sample[ev.mask(threshold_sigma=8.0)]
    assert 10000 in s.tolist() and 10100 in s.tolist() and 10020 not in s.tolist()
    p.detect.dead_time_ms = 0.1
    ev = detect(rec, p)
    assert 10020 in ev.sample[ev.mask(threshold_sigma=8.0)].tolist()


@pytest.mark.parametrize("polarity,sign", [("positive", 1), ("negative", -1), ("both", 1), ("both", -1)])
def test_polarity(tmp_path, polarity, sign):
    x = gaussian(30000, 1, sigma=1.0, seed=4)
    x[15000, 0] += sign * 40
    rec = write_raw(tmp_path / "p.bin", x)
    p = Params()
    p.detect.polarity = polarity
    ev = detect(rec, p)
    keep = ev.mask(threshold_sigma=10.0)
    assert ev.sample[keep].tolist() == [15000]
    assert np.sign(ev.amplitude_uv[keep][0]) == sign


def test_artefacts_on_most_channels_are_flagged(tmp_path):
    x = gaussian(60000, 8, sigma=10.0, seed=5)
    x[30000:30010, :] -= 300  # all channels at once
    x[20000, 2] -= 300       # one channel only: a spike, not an artefact
    rec = write_raw(tmp_path / "a.bin", x, groups=[[0, 1, 2, 3], [4, 5, 6, 7]])
    ev = detect(rec, Params())
    big = ev.mask(threshold_sigma=10.0, include_artefacts=True)
    arte = ev.artefact & big
    assert np.all(np.abs(ev.sample[arte] - 30005) < 40) and arte.sum() >= 2
    assert 20000 in ev.sample[big & ~ev.artefact].tolist()
    assert not ev.mask(threshold_sigma=10.0)[arte].any()


def test_dead_channel_does_not_divide_by_zero(tmp_path):
    x = gaussian(30000, 2, sigma=10.0, seed=6)
    x[:, 1] = 0.0
    rec = write_raw(tmp_path / "z.bin", x)
    ev = detect(rec, Params())
    assert ev.sigma_uv[1] == 0.0 and not np.any(ev.channel == 1)
    assert ev.counts(threshold_uv=50.0)[1] == 0 and np.isinf(ev.thresholds_sigma(threshold_uv=50.0)[1])


def test_cancel_and_progress(tmp_path):
    from rigside.core.progress import Cancelled
    rec, _, _ = spiky(tmp_path)
    seen = []
    detect(rec, Params(), progress=lambda f, m: seen.append(f))
    assert seen[-1] == pytest.approx(1.0) and all(0 <= f <= 1 for f in seen)
    calls = []
    with pytest.raises(Cancelled):
        detect(rec, Params(), cancel=lambda: calls.append(1) or len(calls) > 5)


def test_count_curve_matches_a_brute_force_count_at_every_threshold():
    # brute-force reference (common practice, no source): the non-artefact detected events of the
    # channel whose float32 amplitude is at or above each float32 threshold; thresholds on stored
    # amplitudes (ties count), below all, above all and infinite, on every channel
    rng = np.random.default_rng(5)
    n, channels = 5000, 7
    amp = np.round(3.0 + rng.exponential(1.5, n), 2).astype(np.float32)
    table = EventTable(np.sort(rng.integers(0, 10**6, n)), rng.integers(0, channels - 1, n), np.zeros(n),
                       -amp, amp, rng.random(n) < 0.05, 30000.0, 10**6, np.full(channels, 10.0), 3.0,
                       recovered=rng.random(n) < 0.05)
    keep = ~table.artefact & ~table.recovered
    for c in range(channels):
        mine = table.amplitude_sigma[keep & (table.channel == c)]
        thr = np.concatenate([mine[:3], [-1.0, 2.5, 4.0, 7.77, 1e9, np.inf]]).astype(np.float32)
        want = [int(np.sum(mine >= t)) for t in thr]
        assert table.count_curve(c, thr).tolist() == want


def test_counts_for_all_channels_match_a_count_channel_by_channel():
    # brute-force reference (common practice, no source): per channel, the non-artefact
    # detected events whose float32 amplitude is at or above the channel's float32 threshold;
    # thresholds sit exactly on stored amplitudes (ties count), below all, above all and infinite
    rng = np.random.default_rng(3)
    n, channels = 20000, 384
    amp = np.round(3.0 + rng.exponential(1.5, n), 2).astype(np.float32)
    table = EventTable(np.sort(rng.integers(0, 10**7, n)), rng.integers(0, channels - 1, n), np.zeros(n, np.int32),
                       -amp, amp, rng.random(n) < 0.05, 30000.0, 10**7, np.full(channels, 10.0), 3.0,
                       recovered=rng.random(n) < 0.05)
    thr = np.round(rng.uniform(2.0, 9.0, channels), 2)
    thr[:4] = [float(amp[table.channel == c][0]) for c in range(4)]
    thr[4], thr[5], thr[6] = -1.0, 1e9, np.inf
    got = table.counts(threshold_sigma=thr)
    keep = ~table.artefact & ~table.recovered
    want = [int(np.sum(keep & (table.channel == c) & (table.amplitude_sigma >= np.float32(thr[c]))))
            for c in range(channels)]
    assert got.tolist() == want
    assert got[channels - 1] == 0 and got[4] == int(np.sum(keep & (table.channel == 4)))
