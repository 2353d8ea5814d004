import numpy as np
import pytest

from rigside.core.io.atomic import WriteError
from rigside.core.io.recording import open_recording
from rigside.core.params import FilterParams, Params
from rigside.core.signal import overview
from rigside.core.signal.filtering import BandPass
from rigside.core.signal.overview import (
    TOP_BINS,
    Overview,
    OverviewBuilder,
    build_overview,
    cache_path,
    finest_bin,
    load_overview,
)
from rigside.core.signal.pipeline import detect

from .helpers import gaussian, write_raw

N, NC = 61_237, 5          # not a multiple of any bin: every level ends in a partial bin


def _data(seed: int) -> np.ndarray:
    x = gaussian(N, NC, sigma=40.0, seed=seed)
    rng = np.random.default_rng(seed)
    for t in rng.integers(100, N - 100, 60):            # a few large deflections
        x[t:t + 20, rng.integers(NC)] -= 600 * np.hanning(20)
    return np.round(x).astype(np.int16)


@pytest.fixture
def rec(tmp_path, monkeypatch):
    monkeypatch.setenv("RIGSIDE_CACHE_DIR", str(tmp_path / "cache"))
    monkeypatch.setattr(overview, "MIN_BIN", 16)      # several levels in a short file
    return write_raw(tmp_path / "r.bin", _data(0), gain_uv=0.195)


def reference_levels(rec, params: FilterParams, sizes):
    """numpy min/max per bin of the whole file filtered in one read (common practice, no source;
    BandPass itself is checked against scipy.signal.sosfiltfilt in test_filtering)."""
    y = BandPass(rec, params).read(0, rec.n_samples)
    out = []
    for size in sizes:
        full = len(y) // size
        body = y[:full * size].reshape(full, size, y.shape[1])
        tail = y[full * size:]
        out.append((np.vstack([body.min(axis=1), tail.min(axis=0, keepdims=True)]),
                    np.vstack([body.max(axis=1), tail.max(axis=0, keepdims=True)])))
    return out, float(y.std())


def test_detection_pass_builds_min_max_equal_to_numpy_per_bin_at_every_level(rec):
    params = Params()
    params.run.chunk_s, params.run.workers = 0.0337, 2     # 1011-sample chunks: bins straddle chunks
    builder = OverviewBuilder(rec, params.filter)
    with_overview = detect(rec, params, overview=builder)
    levels = builder.levels()
    sizes = [size for size, _, _ in levels]
    assert sizes[0] == 16 and sizes == [16 << k for k in range(len(sizes))]
    assert len(levels[-1][1]) <= TOP_BINS < len(levels[-2][1])
    ref, sd = reference_levels(rec, params.filter, sizes)
    for (size, lo, hi), (ref_lo, ref_hi) in zip(levels, ref):
        assert lo.shape == ref_lo.shape == (-(-N // size), NC)
        np.testing.assert_allclose(lo, ref_lo, rtol=0, atol=1e-4 * sd)
        np.testing.assert_allclose(hi, ref_hi, rtol=0, atol=1e-4 * sd)
    # the hook leaves detection as it was
    plain = detect(rec, params)
    np.testing.assert_array_equal(with_overview.sample, plain.sample)
    np.testing.assert_array_equal(with_overview.amplitude_uv, plain.amplitude_uv)


def test_saved_overview_reads_back_the_levels_and_standalone_build_agrees(rec):
    params = FilterParams()
    built = build_overview(rec, params)
    ov = Overview(built.save())
    try:
        ref, sd = reference_levels(rec, params, ov.bins)
        chans = np.array([3, 1])
        for size, (ref_lo, ref_hi) in zip(ov.bins, ref):
            i0, lo, hi = ov.read(size, 5 * size + 3, 40 * size + 1, chans)
            assert i0 == 5 and len(lo) == min(len(ref_lo), 41) - 5
            np.testing.assert_allclose(lo, ref_lo[i0:i0 + len(lo)][:, chans], rtol=0, atol=1e-4 * sd)
            np.testing.assert_allclose(hi, ref_hi[i0:i0 + len(hi)][:, chans], rtol=0, atol=1e-4 * sd)
            _, lo_all, _ = ov.read(size, 0, N)
            np.testing.assert_allclose(lo_all, ref_lo, rtol=0, atol=1e-4 * sd)
    finally:
        ov.close()


def test_finest_bin_grows_with_the_file_to_bound_the_overview():
    assert finest_bin(120_000, 16) == overview.MIN_BIN == 256
    # an hour of 64 channels at 30 kHz: 108e6 / 1024 bins x 64 channels <= 2**23 values
    assert finest_bin(108_000_000, 64) == 1024


def test_cache_is_reused_while_the_recording_is_unchanged_and_rebuilt_when_it_changes(rec, tmp_path):
    params = FilterParams()
    assert load_overview(rec, params) is None
    first = build_overview(rec, params).save()
    assert first == cache_path(rec, params) and first.is_relative_to(tmp_path / "cache")
    again = load_overview(open_recording(rec.path), params)
    assert again is not None and again.path == first
    again.close()
    assert load_overview(rec, FilterParams(low_hz=500.0)) is None          # another filter
    rec.content_hash = "xxh3-128:" + "0" * 32                            # the whole content differs
    assert load_overview(rec, params) is None
    rec.content_hash = "sha256:" + "0" * 64           # of another algorithm: not comparable, the key decides
    assert load_overview(rec, params) is not None
    # the file changes (same size): the old cache no longer applies, the rebuilt one replaces it
    _data(1).tofile(rec.path)
    changed = open_recording(rec.path)
    assert load_overview(changed, params) is None
    second = build_overview(changed, params).save()
    assert second != first and not first.exists() and second.exists()
    ov = load_overview(changed, params)
    ref, sd = reference_levels(changed, params, ov.bins[:1])
    np.testing.assert_allclose(ov.read(ov.bins[0], 0, N)[1], ref[0][0], rtol=0, atol=1e-4 * sd)
    ov.close()


def test_an_unwritable_cache_folder_is_a_write_error_and_detection_keeps_its_events(rec, tmp_path, monkeypatch):
    blocker = tmp_path / "not_a_folder"
    blocker.write_text("x")
    monkeypatch.setenv("RIGSIDE_CACHE_DIR", str(blocker))
    builder = build_overview(rec, FilterParams())
    with pytest.raises(WriteError, match="overview folder must be writable"):
        builder.save()
    assert builder.path is None


def test_an_incomplete_pass_gives_no_overview(rec):
    builder = OverviewBuilder(rec, FilterParams())
    y = BandPass(rec, FilterParams()).read(0, 1000)
    builder.add(y, 0, 0, 1000)
    with pytest.raises(RuntimeError, match="every sample once"):
        builder.levels()
