"""Correlograms and ISI histograms against brute-force pair counts."""

import numpy as np
import pytest

from rigside.core.errors import ParamError, RigsideError
from rigside.core.quality.correlograms import autocorrelogram, crosscorrelogram, isi_histogram


def brute_force(a, b, bin_s, window_s, same=False):
    """Every pair (i, j), lag b_j - a_i, bin floor(lag / bin) over [-window, window)."""
    n_half = int(round(window_s / bin_s))
    lags = b[None, :] - a[:, None]
    k = np.floor(lags / bin_s).astype(np.int64) + n_half
    if same:
        k[np.eye(len(a), dtype=bool)] = -1
    k = k[(k >= 0) & (k < 2 * n_half)]
    return np.bincount(k, minlength=2 * n_half)


def test_crosscorrelogram_matches_brute_force():
    rng = np.random.default_rng(0)
    a = np.sort(rng.uniform(0, 20.0, 700))
    b = np.sort(rng.uniform(0, 20.0, 500))
    counts, edges = crosscorrelogram(a, b, 0.001, 0.05)
    assert np.array_equal(counts, brute_force(a, b, 0.001, 0.05))
    assert len(edges) == 101 and edges[0] == pytest.approx(-0.05) and edges[-1] == pytest.approx(0.05)
    # swapping the trains mirrors the lags (up to pairs lying exactly on a bin edge: none here)
    back, _ = crosscorrelogram(b, a, 0.001, 0.05)
    assert np.array_equal(back, counts[::-1])


def test_autocorrelogram_matches_brute_force_and_excludes_self():
    rng = np.random.default_rng(1)
    t = np.sort(rng.uniform(0, 10.0, 800))
    counts, _ = autocorrelogram(t, 0.002, 0.1)
    assert np.array_equal(counts, brute_force(t, t, 0.002, 0.1, same=True))
    assert np.array_equal(counts, counts[::-1])
    # two spikes 3.5 ms apart: one pair in [3, 4) ms, one in [-4, -3) ms, nothing else
    c, e = autocorrelogram(np.array([1.0, 1.0035]), 0.001, 0.005)
    assert e[8] == pytest.approx(0.003) and e[1] == pytest.approx(-0.004)
    assert c[8] == 1 and c[1] == 1 and c.sum() == 2


def test_refractory_gap_shows_in_autocorrelogram():
    # simulation ground truth: dead time 3 ms leaves the bins within +-3 ms empty
    rng = np.random.default_rng(2)
    t = np.cumsum(0.003 + rng.exponential(0.05, 3000))
    counts, edges = autocorrelogram(t, 0.001, 0.02)
    centre = (edges[:-1] + edges[1:]) / 2
    assert counts[np.abs(centre) < 0.003].sum() == 0 and counts.sum() > 0


def test_isi_histogram_matches_numpy():
    rng = np.random.default_rng(3)
    t = np.sort(rng.uniform(0, 30.0, 2000))
    counts, edges = isi_histogram(t, 0.001, 0.1)
    isi = np.diff(t)
    ref, _ = np.histogram(isi[isi < 0.1], bins=edges)   # numpy reference
    assert np.array_equal(counts, ref) and len(counts) == 100


def test_empty_and_bad_input():
    counts, _ = crosscorrelogram(np.array([]), np.array([1.0]), 0.001, 0.01)
    assert counts.sum() == 0 and len(counts) == 20
    assert isi_histogram([0.5], 0.001, 0.01)[0].sum() == 0
    with pytest.raises(ParamError, match="whole number of bins"):
        autocorrelogram([0.0, 1.0], 0.003, 0.01)
    with pytest.raises(ParamError, match="correlogram bin"):
        autocorrelogram([0.0, 1.0], 0.0, 0.01)
    with pytest.raises(RigsideError, match="sorted"):
        crosscorrelogram([0.0, 1.0], [2.0, 1.0], 0.001, 0.01)
    with pytest.raises(RigsideError, match="finite"):
        isi_histogram([0.0, np.inf], 0.001, 0.01)
