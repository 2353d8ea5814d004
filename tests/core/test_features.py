import numpy as np
import pytest
from scipy import signal
from sklearn.decomposition import PCA

from rigside.core.events import EventTable
from rigside.core.params import Params
from rigside.core.signal.features import compute_features, shape_features
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.pipeline import detect
from rigside.core.signal.snippets import (
    align_subsample,
    event_snippets,
    extract_snippets,
    snippet_times_ms,
    snippet_window,
)

from .helpers import gaussian, write_raw

FS = 30000.0


@pytest.fixture(scope="module")
def rec_events(tmp_path_factory):
    rng = np.random.default_rng(2)
    x = gaussian(int(4 * FS), 4, sigma=8.0, seed=21)
    tt = np.arange(-30, 45) / FS * 1000
    a = -np.exp(-tt ** 2 / (2 * 0.15 ** 2)) + 0.4 * np.exp(-(tt - 0.5) ** 2 / (2 * 0.25 ** 2))
    b = -np.exp(-tt ** 2 / (2 * 0.3 ** 2)) + 0.2 * np.exp(-(tt - 0.8) ** 2 / (2 * 0.3 ** 2))
    times = np.sort(rng.choice(np.arange(200, len(x) - 200, 150), 400, replace=False))
    which = rng.integers(0, 2, len(times))
    for t0, u in zip(times, which):
        w = (a if u == 0 else b) * 120
        x[t0 - 30:t0 + 45] += np.outer(w, [1.0, 0.5, 0.3, 0.2] if u == 0 else [0.3, 1.0, 0.5, 0.2]).astype(np.float32)
    rec = write_raw(tmp_path_factory.mktemp("f") / "f.bin", x, groups=[[0, 1, 2, 3]])
    return rec, detect(rec, Params())


def test_snippets_are_aligned_to_the_peak(rec_events):
    rec, ev = rec_events
    p = Params()
    idx = np.flatnonzero(ev.mask(threshold_sigma=6))[:50]
    snips, channels = event_snippets(rec, ev, p, idx)
    before, after = snippet_window(p.snippets, FS)
    assert snips.shape == (50, before + after, 4) and channels.tolist() == [0, 1, 2, 3]
    col = ev.channel[idx]
    np.testing.assert_allclose(snips[np.arange(50), before, col], ev.amplitude_uv[idx], rtol=1e-4, atol=1e-3)
    t = snippet_times_ms(p.snippets, FS)
    assert t[before] == 0 and t[0] == pytest.approx(-0.6, abs=0.04)


def test_snippet_order_follows_the_index(rec_events):
    rec, ev = rec_events
    idx = np.array([30, 5, 17])
    s, _ = event_snippets(rec, ev, Params(), idx)
    one, _ = event_snippets(rec, ev, Params(), np.array([5]))
    np.testing.assert_allclose(s[1], one[0], rtol=1e-4, atol=1e-3)  # reads differ only in float rounding


def test_snippets_at_file_edges_are_zero_padded(rec_events):
    rec, _ = rec_events
    bp = BandPass(rec, Params().filter)
    s = extract_snippets(bp, np.array([0, rec.n_samples - 1]), np.array([0]), Params().snippets)
    before, _ = snippet_window(Params().snippets, FS)
    assert np.all(s[0, :before] == 0) and np.all(s[1, before + 1:] == 0)


def test_pca_matches_scikit_learn_on_independently_cut_snippets(tmp_path):
    # Noise-free events of three symmetric shapes centred on whole samples, 1500 samples apart.
    # Zero-phase filtering keeps each peak symmetric, so the sub-sample alignment shifts by
    # nothing and the snippets can be cut independently: scipy.signal.sosfiltfilt of the whole
    # file (float64, own butter design) and numpy slicing.
    rng = np.random.default_rng(8)
    t = np.arange(-40, 41, dtype=np.float64)
    shapes = [-np.exp(-t ** 2 / 72), (1 - t ** 2 / 36) * np.exp(-t ** 2 / 72), np.exp(-t ** 2 / 400)]
    feet = [np.array([1.0, 0.6, 0.3, 0.1]), np.array([0.2, 1.0, 0.5, 0.3]), np.array([0.4, 0.4, 1.0, 0.6])]
    n_events, gap = 300, 1500
    samples = 3000 + gap * np.arange(n_events)
    weights = rng.normal(0, 1, (n_events, 3)) * [60.0, 35.0, 20.0] + [-120.0, 0.0, 0.0]
    x = np.zeros((samples[-1] + 3000, 4))
    for s0, w in zip(samples, weights):
        x[s0 - 40:s0 + 41] += sum(wi * np.outer(sh, ft) for wi, sh, ft in zip(w, shapes, feet))
    rec = write_raw(tmp_path / "pca.bin", x.astype(np.float32), groups=[[0, 1, 2, 3]])
    y = signal.sosfiltfilt(signal.butter(3, [300, 6000], "bandpass", fs=FS, output="sos"), x, axis=0)
    own = np.abs(y[samples]).argmax(axis=1)
    n = n_events
    events = EventTable(samples, own, np.zeros(n), y[samples, own], np.full(n, 10.0), np.zeros(n, bool),
                        FS, len(x), np.ones(4), 3.0)
    p = Params()
    p.snippets.pca_fit_events = n                 # fit on every event, as the reference does
    before, after = snippet_window(p.snippets, FS)
    snips = np.stack([y[s0 - before:s0 + after] for s0 in samples])
    # reference implementation: scikit-learn PCA; component signs are arbitrary
    ref = PCA(n_components=3).fit_transform(snips.reshape(n, -1))
    f = compute_features(rec, events, p)
    scale = np.abs(ref).max(axis=0)
    np.testing.assert_allclose(np.abs(f.values[:, :3]) / scale, np.abs(ref) / scale, atol=1e-3)
    assert f.names == ["PC1", "PC2", "PC3", "peak_uv", "width_ms", "energy_uv2"]


def test_two_waveforms_separate_in_pc_space_and_width(rec_events):
    rec, ev = rec_events
    f = compute_features(rec, ev, Params())
    keep = ev.mask(threshold_sigma=8)
    width = f.column("width_ms")[keep]
    # narrow (0.5 ms rebound) and wide (0.8 ms rebound) waveforms: widths form two groups
    assert np.sum(np.abs(width - 0.5) < 0.1) > 50 and np.sum(np.abs(width - 0.8) < 0.15) > 50


def test_shape_features_on_a_known_trace():
    snips = np.zeros((1, 10, 2), np.float32)
    snips[0, 3, 1] = -50
    snips[0, 7, 1] = 20
    out = shape_features(snips, np.array([1]), before=3, rate_hz=10000.0)
    assert out[0, 0] == -50 and out[0, 1] == pytest.approx(0.4) and out[0, 2] == pytest.approx((2500 + 400) / 20)


def test_subsample_alignment_recovers_a_known_shift():
    # a parabola-shaped peak placed between samples: after alignment its maximum sits on the
    # peak sample and neighbours are symmetric (linear interpolation, parabolic vertex)
    t = np.arange(-5, 6, dtype=np.float64)
    shift = 0.3
    trace = -(10 - (t - shift) ** 2)
    padded = np.stack([trace, 0.5 * trace], axis=1)[None].astype(np.float32)
    out = align_subsample(padded, np.array([0]), before=4)
    k = 4
    assert out.shape == (1, 9, 2)
    assert out[0, k - 1, 0] == pytest.approx(out[0, k + 1, 0], abs=0.15)
    np.testing.assert_allclose(out[0, :, 1], 0.5 * out[0, :, 0], rtol=1e-6)
