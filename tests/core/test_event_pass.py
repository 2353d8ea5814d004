"""Detection and features in one pass equal detection followed by the feature passes.

References: the events of :func:`detect` selected by ``EventTable.mask`` at the thresholds;
the per-event features of ``test_feature_chunks.reference`` (the whole file filtered in one
read, each window sliced with numpy, scikit-learn's PCA: reference implementation
scikit-learn); PCA scores as scikit-learn's ``PCA.transform`` defines them (centre, then
project on the components).
"""

import numpy as np
import pytest

from rigside.core.params import Params
from rigside.core.progress import Cancelled
from rigside.core.signal.event_pass import detect_with_features, spread_order
from rigside.core.signal.pipeline import detect, thresholds_sigma

from .test_feature_chunks import FS, captured_fit_inputs, edge_recording, reference


@pytest.fixture(scope="module")
def rec(tmp_path_factory):
    return edge_recording(tmp_path_factory.mktemp("one_pass"))


def params(fit_events: int, chunk_s: float = 0.05) -> Params:
    p = Params()
    p.snippets.pca_fit_events = fit_events
    p.run.chunk_s = chunk_s  # 30 chunks of the 1.5 s file, events on their edges
    p.run.workers = 2
    return p


def detected(rec, p):
    table = detect(rec, p)
    return table.subset(table.mask(threshold_sigma=thresholds_sigma(p, table.sigma_uv), include_artefacts=True))


@pytest.mark.parametrize("per_channel", [False, True])
def test_events_are_those_of_detect_at_the_threshold(rec, per_channel):
    p = params(100000)
    if per_channel:
        p.detect.channel_thresholds_sigma = [4.0, 6.0, 5.0, 8.0, 4.5, 5.5]
    ev, feats = detect_with_features(rec, p)
    want = detected(rec, p)
    assert len(want) > 250
    for column in want.columns:
        np.testing.assert_array_equal(getattr(ev, column), getattr(want, column), err_msg=column)
    np.testing.assert_array_equal(ev.sigma_uv, want.sigma_uv)
    assert feats.values.shape == (len(ev), p.snippets.n_pcs + 3) and feats.values.dtype == np.float32


def test_with_every_event_in_the_fit_the_features_equal_the_per_event_reference(rec):
    p = params(100000)
    ev, f = detect_with_features(rec, p)
    ref, _, _ = reference(rec, ev, p)
    # chunks are filtered from their own margins: ~2e-5 of the signal SD from the one whole-file read
    np.testing.assert_allclose(f.values[:, 3], ref[:, 3], rtol=0, atol=2e-3)  # peak (uV)
    np.testing.assert_array_equal(f.values[:, 4], ref[:, 4])                  # width (ms)
    np.testing.assert_allclose(f.values[:, 5], ref[:, 5], rtol=1e-4)          # energy
    np.testing.assert_allclose(f.values[:, :3], ref[:, :3], rtol=0, atol=1e-2 * np.abs(ref[:, :3]).max())


def test_a_group_is_fitted_on_the_subset_size_and_every_event_projected_on_its_basis(rec, monkeypatch):
    p = params(60)
    seen = captured_fit_inputs(monkeypatch)
    ev, f = detect_with_features(rec, p)
    _, _, flats = reference(rec, ev, p)
    assert sorted(len(x) for x in seen) == [60, 60] and sorted(f.bases) == [0, 1]
    for g, (rows, flat) in flats.items():
        assert len(rows) > 100
        basis = f.bases[g]
        scores = (flat - basis.mean_) @ basis.components_.T   # PCA.transform's definition
        np.testing.assert_allclose(f.values[rows, :3], scores, rtol=0, atol=1e-2 * np.abs(scores).max())


def test_the_fit_subset_is_drawn_from_the_first_chunks_in_spread_order(rec, monkeypatch):
    p = params(60)
    seen = captured_fit_inputs(monkeypatch)
    ev, _ = detect_with_features(rec, p)
    _, _, flats = reference(rec, ev, p)
    chunk = int(p.run.chunk_s * FS)
    order = spread_order(-(-rec.n_samples // chunk))
    assert len(seen) == 2
    for x in seen:
        # which events were fitted: the reference snippet nearest each fit row, in the group holding them
        dist = {g: ((x[:, None, :] - flat[None, :, :]) ** 2).sum(axis=2) for g, (_, flat) in flats.items()}
        g = min(dist, key=lambda k: dist[k].min(axis=1).sum())
        rows, nearest = flats[g][0], np.argmin(dist[g], axis=1)
        assert dist[g].min(axis=1).max() < 1e-2 * (x ** 2).sum(axis=1).min()
        taken = set((ev.sample[rows[nearest]] // chunk).tolist())
        per_chunk = np.bincount(ev.sample[rows] // chunk, minlength=len(order))[order]
        first = int(np.searchsorted(np.cumsum(per_chunk), 60)) + 1  # chunks taken until 60 were held
        assert taken <= set(order[:first])
        assert max(taken) - min(taken) > len(order) / 2  # spread over the file, not its start


@pytest.mark.parametrize("n", [1, 2, 7, 30, 600])
def test_spread_order_is_a_permutation_whose_prefixes_cover_the_range(n):
    order = spread_order(n)
    assert sorted(order) == list(range(n))
    for k in (2, 4, 8, 16):
        if k <= n:
            gaps = np.diff(np.r_[sorted(order[:k]), n])
            assert gaps.max() <= 2 * n / k + 1  # every prefix of k chunks leaves no gap above 2n/k


def test_cancel_stops_the_pass(rec):
    with pytest.raises(Cancelled):
        detect_with_features(rec, params(100000), cancel=lambda: True)
