"""Practice recording settings: checked values, TOML files, and what each setting does to the
synthetic recording (invented data, for ground-truth checks only)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from rigside.core.errors import ParamError
from rigside.core.io.recording import open_recording
from rigside.core.params import FilterParams
from rigside.core.progress import Cancelled
from rigside.core.signal.filtering import design_bandpass
from rigside.core.signal.noise import robust_sigma
from rigside.core.synthetic.render import band_noise_sigma, render
from rigside.core.synthetic.settings import SynthSettings, settings_path
from rigside.core.synthetic.synth import REFRACTORY_S, build_scenario, write_practice
from rigside.sample_data import demo_path

DEMO_FILES = ("demo.bin", "demo.truth.csv", "demo.truth_units.csv")


def test_default_settings_write_the_bundled_demo_byte_for_byte(tmp_path):
    # the bundled demo was made with `rigside synth demo.bin --seconds 4 --seed 0`
    write_practice(tmp_path / "demo.bin", SynthSettings(seconds=4.0))
    for name in DEMO_FILES:
        assert (tmp_path / name).read_bytes() == (demo_path().parent / name).read_bytes(), name
    made, bundled = open_recording(tmp_path / "demo.bin"), open_recording(demo_path())
    try:
        layout = [{k: v for k, v in r.describe().items() if k != "path"} for r in (made, bundled)]
        assert layout[0] == layout[1]
        np.testing.assert_array_equal(made.read(0, 3000), bundled.read(0, 3000))   # same gain to microvolts
    finally:
        made.close()
        bundled.close()
    assert SynthSettings.load(settings_path(tmp_path / "demo.bin")) == SynthSettings(seconds=4.0)


def test_settings_round_trip_through_toml(tmp_path):
    s = SynthSettings(seconds=2.5, channels=6, group_size=3, units=5, snr=(4.0, 9.0), rates_hz=(2.0, 20.0),
                      noise_uv=7.0, noise_colour="white", hum_uv=0.0, drift_uv=10.0, artefacts_per_min=0.0,
                      overlap_fraction=0.1, seed=12)
    path = s.save(tmp_path / "x.synth.toml")
    assert SynthSettings.load(path) == s
    assert SynthSettings.from_toml("[practice_recording]\nseconds = 3\n").seconds == 3.0


@pytest.mark.parametrize("text, words", [
    ("[practice_recording]\nbogus = 1\n", "only the keys"),
    ("[practice_recording]\nseconds = -1\n", "length in seconds"),
    ("[practice_recording]\nchannels = 2.5\n", "channel count"),
    ("[practice_recording]\nunits = true\n", "unit count"),
    ("[practice_recording]\nsnr = [5, 2]\n", "SNR range"),
    ("[practice_recording]\nrates_hz = [1, 2, 3]\n", "pair"),
    ("[practice_recording]\nnoise_colour = \"pink\"\n", "noise_colour"),
    ("[practice_recording]\noverlap_fraction = 0.9\n", "overlap fraction"),
    ("[practice_recording]\nseconds = nan\n", "length in seconds"),
    ("[practice_recording]\nlayout = \"probe\"\n", "layout"),
    ("seconds = 3\n", "one [practice_recording] table"),
    ("[practice_recording\n", "valid TOML"),
    ("[practice_recording]\nseconds = " + "[" * 200 + "]" * 200 + "\n", "nested"),
])
def test_bad_settings_are_refused_in_one_line(text, words):
    with pytest.raises(ParamError) as err:
        SynthSettings.from_toml(text)
    assert words in str(err.value) and "\n" not in str(err.value)


def test_missing_or_unreadable_settings_files(tmp_path):
    with pytest.raises(ParamError, match="must exist"):
        SynthSettings.load(tmp_path / "nope.toml")
    with pytest.raises(ParamError, match="directory"):
        SynthSettings.load(tmp_path)
    (tmp_path / "b.toml").write_bytes(b"\xff\xfe\x00[")
    with pytest.raises(ParamError, match="UTF-8"):
        SynthSettings.load(tmp_path / "b.toml")
    (tmp_path / "e.toml").write_bytes(b"")
    with pytest.raises(ParamError, match="one \\[practice_recording\\] table"):
        SynthSettings.load(tmp_path / "e.toml")


def test_unit_count_amplitudes_and_rates_follow_the_settings():
    sc = build_scenario(SynthSettings(seconds=20.0, channels=12, units=7, amplitude_uv=(80.0, 120.0),
                                      rates_hz=(5.0, 10.0), seed=4))
    assert len(sc.units) == 7 and [sum(u.group == g for u in sc.units) for g in range(3)] == [3, 2, 2]
    assert all(80.0 * 0.88 <= u.amplitude_uv <= 120.0 for u in sc.units)   # a look-alike twin is 0.88 of its pair
    assert all(5.0 - 1e-9 <= u.rate_hz <= 10.0 + 1e-9 for u in sc.units)
    for u in sc.units:   # every train keeps the 2 ms refractory period
        assert np.all(np.diff(sc.spike_sample[sc.spike_unit == u.unit]) >= REFRACTORY_S * sc.rate_hz - 1)
    empty = build_scenario(SynthSettings(seconds=2.0, units=0, artefacts_per_min=0.0))
    assert len(empty.units) == 0 and len(empty.spike_sample) == 0 and len(empty.artefact_sample) == 0


def test_snr_range_is_relative_to_the_band_noise():
    s = SynthSettings(seconds=1.0, snr=(6.0, 12.0), seed=1)
    sigma = band_noise_sigma(s, design_bandpass(FilterParams(), s.rate_hz))
    amps = [u.amplitude_uv for u in build_scenario(s).units]
    assert min(amps) >= 6.0 * sigma * 0.88 - 1e-9 and max(amps) <= 12.0 * sigma + 1e-9


@pytest.mark.parametrize("colour", ["white", "coloured"])
def test_expected_band_noise_matches_the_rendered_background(colour):
    # reference filter: scipy.signal.sosfiltfilt; robust sigma (Quian Quiroga et al. 2004, CHECKS 1)
    s = SynthSettings(seconds=4.0, units=0, artefacts_per_min=0.0, noise_colour=colour, noise_uv=9.0, seed=2)
    sc = build_scenario(s)
    x = np.concatenate([chunk for _, chunk in render(sc)]).astype(np.float64)
    sos = design_bandpass(FilterParams(), s.rate_hz)
    filtered = signal.sosfiltfilt(sos, x, axis=0)[3000:-3000]
    measured = np.median([robust_sigma(filtered[:, c]) for c in range(x.shape[1])])
    assert measured == pytest.approx(band_noise_sigma(s, sos), rel=0.03)


def test_overlap_fraction_adds_near_coincident_spikes_within_a_bundle():
    def close_pairs(fraction: float) -> int:
        sc = build_scenario(SynthSettings(seconds=30.0, channels=4, overlap_fraction=fraction, seed=6))
        t = sc.spike_sample
        gap = np.diff(t)
        other = sc.spike_unit[1:] != sc.spike_unit[:-1]
        return int(np.sum(other & (gap >= 0.0002 * sc.rate_hz - 1) & (gap <= 0.001 * sc.rate_hz + 1))), len(t)
    base, n = close_pairs(0.0)
    more, _ = close_pairs(0.2)
    # about a fifth of the spikes gain a partner (fewer where the partner's refractory period drops it)
    assert more - base > 0.12 * n


def test_size_estimate_is_close_to_what_is_written(tmp_path):
    s = SynthSettings(seconds=20.0, channels=8, rates_hz=(5.0, 30.0), seed=3)
    write_practice(tmp_path / "s.bin", s)
    assert (tmp_path / "s.bin").stat().st_size == s.raw_bytes() == 20 * 30000 * 8 * 2
    written = sum(f.stat().st_size for f in tmp_path.iterdir())
    assert abs(s.estimated_bytes() - written) < 0.02 * written   # the truth rows are a small, rough share


def test_a_cancelled_write_leaves_no_file(tmp_path):
    calls = []

    def cancel() -> bool:
        calls.append(1)
        return len(calls) > 2          # after the second chunk
    with pytest.raises(Cancelled):
        write_practice(tmp_path / "c.bin", SynthSettings(seconds=10.0, channels=4), cancel=cancel)
    assert list(tmp_path.iterdir()) == []
