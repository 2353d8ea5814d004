"""Features cut in chunked passes equal features cut per event from the whole filtered file.

The reference is written the plain way: the whole small file filtered in one read by the
project's BandPass, each event's window sliced with numpy, aligned, and scikit-learn's PCA
fitted on the same seeded subset (reference implementation: scikit-learn).
"""

import numpy as np
import pytest
import sklearn.decomposition
from sklearn.decomposition import PCA

from rigside.core.errors import RigsideError
from rigside.core.params import Params
from rigside.core.signal.chunk_pool import single_threaded_pools
from rigside.core.signal.features import compute_features, shape_features, usable_channels
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.pipeline import detect
from rigside.core.signal.snippet_pass import own_columns
from rigside.core.signal.snippets import align_subsample, snippet_window

from .helpers import gaussian, write_raw

FS = 30000.0
GROUPS = [[3, 0, 5], [4, 1, 2]]  # channel groups not in ascending order


def edge_recording(folder):
    """1.5 s of 6 channels in two unordered groups, spikes near both file ends and everywhere."""
    rng = np.random.default_rng(5)
    x = gaussian(int(1.5 * FS), 6, sigma=6.0, seed=4)
    tt = np.arange(-30, 45) / FS * 1000
    wave = -np.exp(-tt ** 2 / (2 * 0.2 ** 2)) + 0.3 * np.exp(-(tt - 0.6) ** 2 / (2 * 0.3 ** 2))
    # spikes everywhere, including within a window of both file ends and of chunk edges
    times = np.r_[5, 12, np.sort(rng.choice(np.arange(60, len(x) - 60, 97), 300, replace=False)), len(x) - 8]
    for t0 in times:
        g = GROUPS[int(rng.integers(0, 2))]
        lo, hi = max(0, t0 - 30), min(len(x), t0 + 45)
        x[lo:hi, g[int(rng.integers(0, 3))]] += (140 * wave[lo - (t0 - 30):hi - (t0 - 30)]).astype(np.float32)
    return write_raw(folder / "c.bin", x, groups=GROUPS)


@pytest.fixture(scope="module")
def rec_events(tmp_path_factory):
    rec = edge_recording(tmp_path_factory.mktemp("chunks"))
    return rec, detect(rec, Params())


def reference(rec, ev, p):
    """Features from the whole filtered file, the fit subset of each group, and each group's
    ``(rows, flattened snippets)``."""
    y = BandPass(rec, p.filter).read(0, rec.n_samples)
    before, after = snippet_window(p.snippets, FS)
    out = np.zeros((len(ev), p.snippets.n_pcs + 3), np.float32)
    fit_inputs, flats = [], {}
    for g in np.unique(ev.group):
        rows = np.flatnonzero(ev.group == g)
        rows = rows[np.argsort(ev.sample[rows], kind="stable")]
        channels = usable_channels(rec.groups[int(g)], ev.excluded)
        own = np.array([list(channels).index(c) for c in ev.channel[rows]])
        padded = np.zeros((len(rows), before + after + 2, len(channels)), np.float32)
        for i, s in enumerate(ev.sample[rows]):  # one window at a time, zero beyond the file
            lo, hi = s - before - 1, s + after + 1
            piece = y[max(0, lo):min(rec.n_samples, hi)][:, channels]
            padded[i, max(0, -lo):max(0, -lo) + len(piece)] = piece
        snips = align_subsample(padded, own, before)
        rng = np.random.default_rng([p.snippets.seed, int(g)])    # one generator per group, seeded by its id
        fit = np.sort(rng.choice(len(rows), size=min(len(rows), p.snippets.pca_fit_events), replace=False))
        flat = snips.reshape(len(rows), -1)
        fit_inputs.append(flat[fit])
        flats[int(g)] = rows, flat
        with single_threaded_pools():
            pca = PCA(n_components=p.snippets.n_pcs, random_state=p.snippets.seed).fit(flat[fit])
        out[rows, :p.snippets.n_pcs] = pca.transform(flat)
        out[rows, p.snippets.n_pcs:] = shape_features(snips, own, before, FS)
    return out, fit_inputs, flats


def captured_fit_inputs(monkeypatch):
    seen = []

    class Recording(PCA):
        def fit(self, x, y=None):
            seen.append(np.array(x))
            return super().fit(x)
    monkeypatch.setattr(sklearn.decomposition, "PCA", Recording)   # read by the fit at call time
    return seen


@pytest.mark.parametrize("fit_events", [60, 100000])  # a subset of each group, or all of it
def test_one_chunk_equals_per_event_features_exactly(rec_events, monkeypatch, fit_events):
    rec, ev = rec_events
    p = Params()
    p.snippets.pca_fit_events = fit_events
    p.run.chunk_s = 10.0  # one chunk: the same filtered samples as the whole-file read
    seen = captured_fit_inputs(monkeypatch)
    f = compute_features(rec, ev, p)
    ref, ref_fit, _ = reference(rec, ev, p)
    assert len(seen) == 2 and len(ev) > 250
    for got, want in zip(seen, ref_fit):
        np.testing.assert_array_equal(got, want)  # same PCA input, bit for bit
    # the same PCA on the same input; BLAS may sum in another order on one thread than on several
    # (seen with the floor versions), so the scores agree to float32 rounding
    np.testing.assert_allclose(f.values, ref, rtol=1e-5, atol=1e-5 * np.abs(ref).max())


def test_many_chunks_equal_per_event_features(rec_events, monkeypatch):
    rec, ev = rec_events
    p = Params()
    p.snippets.pca_fit_events = 80
    p.run.chunk_s = 0.05  # 30 chunks, events on their edges
    p.run.workers = 2
    seen = captured_fit_inputs(monkeypatch)
    f = compute_features(rec, ev, p)
    ref, ref_fit, _ = reference(rec, ev, p)
    # chunks are filtered from their own margins: float32 filtering differs from the one
    # whole-file read by ~2e-5 of the signal SD (core.filtering), nothing more
    for got, want in zip(seen, ref_fit):
        np.testing.assert_allclose(got, want, rtol=0, atol=2e-3)
    np.testing.assert_allclose(f.values[:, 3], ref[:, 3], rtol=0, atol=2e-3)  # peak (uV)
    np.testing.assert_array_equal(f.values[:, 4], ref[:, 4])                  # width (ms)
    np.testing.assert_allclose(f.values[:, 5], ref[:, 5], rtol=1e-4)          # energy
    np.testing.assert_allclose(f.values[:, :3], ref[:, :3], rtol=0, atol=1e-2 * np.abs(ref[:, :3]).max())
    # the own channel of each event is found in any channel order: the peak is the event's amplitude
    np.testing.assert_allclose(f.values[:, 3], ev.amplitude_uv, rtol=0, atol=5e-3 * np.abs(ev.amplitude_uv).max())


def test_index_rows_follow_the_index(rec_events):
    rec, ev = rec_events
    p = Params()
    p.snippets.pca_fit_events = 100000
    pick = np.array([40, 3, 17, 200, 2])
    shape = compute_features(rec, ev, p, index=pick).values[:, 3:]
    np.testing.assert_allclose(shape, compute_features(rec, ev, p).values[pick, 3:], rtol=1e-6)


def test_event_off_its_groups_usable_channels_is_refused():
    channels = [np.array([3, 0, 5]), np.array([4, 2])]  # channel 1 excluded from the second group
    own = own_columns(np.array([0, 5, 2, 4]), np.array([0, 0, 1, 1]), channels, 6)
    assert own.tolist() == [1, 2, 1, 0]
    with pytest.raises(RigsideError, match="event channel must be a usable channel of its group, got channel 1"):
        own_columns(np.array([1]), np.array([1]), channels, 6)
