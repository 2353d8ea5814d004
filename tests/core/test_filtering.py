import numpy as np
import pytest
from scipy import signal

from rigside.core.params import FilterParams
from rigside.core.signal.filtering import BandPass, common_median_reference, design_bandpass, filtfilt

from .helpers import gaussian, write_raw

FS = 30000.0


def test_design_has_the_closed_form_butterworth_response():
    # Bilinear-transformed analog Butterworth band-pass of prototype order N (Oppenheim &
    # Schafer, Discrete-Time Signal Processing, 3rd ed., sec. 7.2 [memory]): with
    # W = tan(pi f / fs) and edges W1, W2,
    # |H|^2 = 1 / (1 + ((W^2 - W1 W2) / (W (W2 - W1)))^(2N)); response via scipy.signal.sosfreqz
    sos = design_bandpass(FilterParams(), FS)
    f = np.array([50.0, 150.0, 300.0, 1000.0, 1341.6, 3000.0, 6000.0, 9000.0, 13000.0])
    _, h = signal.sosfreqz(sos, worN=f, fs=FS)
    w, w1, w2 = (np.tan(np.pi * x / FS) for x in (f, 300.0, 6000.0))
    want = 1 / (1 + ((w ** 2 - w1 * w2) / (w * (w2 - w1))) ** 6)
    np.testing.assert_allclose(np.abs(h) ** 2, want, rtol=1e-9, atol=1e-15)
    assert sos.shape == (3, 6)                      # order 3 band-pass: six poles, three sections


@pytest.mark.parametrize("f_hz", [300.0, 6000.0])
def test_forward_backward_corners_at_minus_6_02_db(f_hz):
    # scipy.signal docs: one pass of a Butterworth is -3.0103 dB at the corners,
    # forward-backward squares it: |H|^2 = 0.5 (-6.0206 dB), zero phase.
    sos = design_bandpass(FilterParams(), FS)
    t = np.arange(int(FS * 2)) / FS
    x = np.sin(2 * np.pi * f_hz * t)[:, None].astype(np.float32)
    y = filtfilt(x, sos)[:, 0]
    mid = slice(int(0.5 * FS), int(1.5 * FS))
    gain = np.sqrt(np.mean(y[mid] ** 2) / np.mean(x[mid, 0] ** 2))
    assert 20 * np.log10(gain) == pytest.approx(-6.0206, abs=0.01)
    # zero phase: the filtered steady sine keeps its phase (correlation with the input sine)
    lag = np.argmax(signal.correlate(y[mid], x[mid, 0], mode="same")) - len(y[mid]) // 2
    assert lag == 0


def test_chunked_equals_whole_array_sosfiltfilt(tmp_path):
    data = gaussian(60000, 3, sigma=20.0, seed=1)
    rec = write_raw(tmp_path / "r.bin", data)
    bp = BandPass(rec, FilterParams())
    pieces = np.concatenate([bp.read(s, min(s + 7001, 60000)) for s in range(0, 60000, 7001)])
    # reference implementation: scipy.signal.sosfiltfilt on the whole array (float64)
    ref = signal.sosfiltfilt(bp.sos, data.astype(np.float64), axis=0)
    inner = slice(3000, 57000)  # away from the file's ends, where padding differs
    err = np.abs(pieces[inner] - ref[inner]).max()
    assert err < 1e-4 * ref.std()
    # near the ends the two differ (their initial conditions differ); ours must stay bounded
    assert np.abs(pieces).max() < 8 * ref.std()


def test_reading_a_channel_subset_equals_full_read(tmp_path):
    rec = write_raw(tmp_path / "r.bin", gaussian(20000, 4, seed=2))
    bp = BandPass(rec, FilterParams())
    np.testing.assert_array_equal(bp.read(5000, 9000, np.array([2, 0])), bp.read(5000, 9000)[:, [2, 0]])


def test_common_median_reference_per_group():
    # constructed so the answer is known (no median computed in the test): each row of a group
    # is a shared offset plus deviations whose median is 0 by construction (three channels: 0,
    # one above and one below; four channels: the middle pair is -m and +m)
    rng = np.random.default_rng(3)
    n = 100
    dev3 = rng.permuted(np.column_stack([np.zeros(n), np.full(n, 7.0), -rng.uniform(1, 9, n)]), axis=1)
    mid = rng.uniform(0.5, 2, n)
    dev4 = rng.permuted(np.column_stack([-mid, mid, mid + rng.uniform(1, 5, n), -mid - rng.uniform(1, 5, n)]),
                        axis=1)
    offsets = rng.normal(0, 50, (n, 2))
    x = np.column_stack([dev3 + offsets[:, :1], dev4 + offsets[:, 1:]]).astype(np.float32)
    out = common_median_reference(x.copy(), [np.array([0, 1, 2]), np.array([3, 4, 5, 6])])
    np.testing.assert_allclose(out, np.column_stack([dev3, dev4]), atol=1e-4)


def test_common_reference_removes_shared_signal(tmp_path):
    rng = np.random.default_rng(4)
    shared = rng.normal(size=(30000, 1)) * 50
    data = (shared + rng.normal(size=(30000, 4)) * 5).astype(np.float32)
    rec = write_raw(tmp_path / "r.bin", data, groups=[[0, 1, 2, 3]])
    plain = BandPass(rec, FilterParams()).read(0, 30000)
    referenced = BandPass(rec, FilterParams(common_reference=True)).read(0, 30000)
    assert referenced.std() < 0.3 * plain.std()


def test_recording_shorter_than_the_filter_needs(tmp_path):
    from rigside.core.errors import RecordingError
    rec = write_raw(tmp_path / "r.bin", gaussian(50, 2))
    with pytest.raises(RecordingError, match="long for a 300-6000 Hz band-pass to settle, got 50"):
        BandPass(rec, FilterParams())
    rec = write_raw(tmp_path / "s.bin", gaussian(800, 2))
    y = BandPass(rec, FilterParams()).read(0, 800)
    assert y.shape == (800, 2) and np.isfinite(y).all()
