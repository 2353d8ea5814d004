"""Detection on a probe: spatio-temporal peaks over neighbourhoods, threshold-independent, with positions."""

from __future__ import annotations

import numpy as np
import pytest

from rigside.core.errors import RigsideError
from rigside.core.events import EventTable
from rigside.core.io.recording import Layout, RawRecording, write_metadata
from rigside.core.params import Params
from rigside.core.signal.neighbourhoods import neighbourhoods
from rigside.core.signal.pipeline import detect
from rigside.core.signal.probe_detection import detect_probe_block
from rigside.core.synthetic.probe_synth import probe_layout
from tests.core.helpers import gaussian

RATE = 30000.0
X, Y, SHANK = probe_layout(32, columns=2, pitch_um=20.0, shanks=1)
SITES = np.column_stack([X, Y])


def trough(n: int, at: int, width: float = 6.0) -> np.ndarray:
    """A negative Gaussian trough of depth 1 at sample ``at`` (invented waveform)."""
    t = np.arange(n)
    return -np.exp(-((t - at) ** 2) / (2 * width ** 2))


def add_spike(data, at, x, y, amplitude, decay=25.0):
    gains = np.exp(-np.hypot(SITES[:, 0] - x, SITES[:, 1] - y) / decay)
    data += amplitude * trough(len(data), at)[:, None] * gains[None, :]
    return int(np.argmax(gains))


def probe_recording(path, data, x=X, y=Y, shank=SHANK):
    data = np.ascontiguousarray(data, dtype=np.float32)
    data.tofile(path)
    layout = Layout(channels=data.shape[1], rate_hz=RATE, dtype="float32", x_um=list(x), y_um=list(y),
                    shank=[int(s) for s in shank])
    write_metadata(path, layout)
    return RawRecording(path, layout)


def spikes_on_noise(seed=0, n=60000, count=40, amplitude=(90.0, 200.0)):
    rng = np.random.default_rng(seed)
    data = gaussian(n, 32, sigma=8.0, seed=seed)
    truth = []
    for at in np.sort(rng.choice(np.arange(200, n - 200, 900), count, replace=False)):
        x, y = rng.uniform(-5, 25), rng.uniform(0, 300)
        truth.append((at, add_spike(data, at, x, y, rng.uniform(*amplitude)), x, y))
    return data, truth


def test_one_event_per_spike_at_its_peak_site_although_it_reaches_many_sites(tmp_path):
    data, truth = spikes_on_noise()
    rec = probe_recording(tmp_path / "p.bin", data)
    ev = detect(rec, Params())
    keep = ev.mask(threshold_sigma=4.5)
    assert ev.x_um is not None and keep.sum() >= len(truth)
    for at, peak, _, _ in truth:
        near = keep & (np.abs(ev.sample - at) <= 30)
        assert near.sum() == 1, (at, ev.channel[near])      # one event though the spike reaches ~10 sites
        assert abs(int(ev.sample[near][0]) - at) <= 5      # a wide trough on noise
        # at its peak site or, when noise tips a unit lying between sites, at a site next to it
        assert np.hypot(*(SITES[ev.channel[near][0]] - SITES[peak])) <= 29.0


def test_position_is_the_amplitude_weighted_centre_of_mass_of_the_neighbourhood():
    # reference: numpy's weighted average over the neighbourhood (the estimator's definition)
    data = np.zeros((400, 32), np.float32)
    add_spike(data, 200, 7.0, 133.0, 100.0)
    nb = neighbourhoods(SITES, SHANK, 50.0)
    out = detect_probe_block(data, 0, 10, 390, np.ones(32), nb, SITES, np.zeros(32, np.int32), "negative",
                             4.5, 30, 5.0, 0.5, 15, 6)
    assert len(out.sample) == 1 and out.sample[0] == 200
    members = nb.of(int(out.channel[0]))
    weights = np.clip(-data[194:207, members], 0, None).max(axis=0)
    np.testing.assert_allclose([out.x_um[0], out.y_um[0]], np.average(SITES[members], axis=0, weights=weights),
                               rtol=1e-5)
    # the centre of mass lies between the peak site and the true position (biased toward the site)
    assert abs(out.y_um[0] - 133.0) < abs(SITES[out.channel[0], 1] - 133.0) + 1e-6


def test_look_up_equals_fresh_detection(tmp_path):
    # the definition is threshold-independent (common practice, no source): a fresh detection at a
    # higher floor finds exactly the stored events that reach it
    data, _ = spikes_on_noise(seed=2)
    rec = probe_recording(tmp_path / "p.bin", data)
    low = Params()
    low.detect.floor_sigma = 3.5
    table = detect(rec, low)
    for k in (4.0, 5.5, 8.0):
        fresh = Params()
        fresh.detect.threshold_sigma = k
        direct = detect(rec, fresh, noise=None)
        sub = table.subset(table.mask(threshold_sigma=k, include_artefacts=True))
        np.testing.assert_array_equal(sub.sample, direct.sample)
        np.testing.assert_array_equal(sub.channel, direct.channel)
        np.testing.assert_array_equal(sub.x_um, direct.x_um)


def test_result_does_not_depend_on_chunking_or_threads(tmp_path):
    data, _ = spikes_on_noise(seed=3)
    rec = probe_recording(tmp_path / "p.bin", data)
    a, b = Params(), Params()
    b.run.chunk_s, b.run.workers = 0.13, 3
    ea, eb = detect(rec, a), detect(rec, b)
    for column in ("sample", "channel", "group", "artefact"):
        np.testing.assert_array_equal(getattr(ea, column), getattr(eb, column))
    # filter margins differ between chunkings: values agree to float32 rounding
    for column in ("amplitude_uv", "x_um", "y_um"):
        np.testing.assert_allclose(getattr(ea, column), getattr(eb, column), rtol=1e-4, atol=1e-3)


def test_close_spikes_within_a_neighbourhood_give_one_event_far_ones_two():
    data = np.zeros((600, 32), np.float32)
    add_spike(data, 200, 0.0, 40.0, 100.0)
    add_spike(data, 215, 20.0, 60.0, 60.0)      # 28 um away, 0.5 ms later: inside both windows
    add_spike(data, 202, 0.0, 240.0, 80.0)      # 200 um away at the same time: its own event
    nb = neighbourhoods(SITES, SHANK, 50.0)
    out = detect_probe_block(data, 0, 10, 590, np.ones(32), nb, SITES, np.zeros(32, np.int32), "negative",
                             4.5, 30, 5.0, 0.5, 15, 6)
    assert out.sample.tolist() == [200, 202]
    assert SITES[out.channel].tolist() == [[0.0, 40.0], [0.0, 240.0]]


@pytest.mark.parametrize("polarity, sign", [("positive", 1.0), ("both", 1.0), ("both", -1.0)])
def test_polarity(polarity, sign):
    data = np.zeros((400, 32), np.float32)
    add_spike(data, 200, 0.0, 100.0, 50.0 * sign * -1)   # trough() is negative: -1 makes it positive
    nb = neighbourhoods(SITES, SHANK, 50.0)
    out = detect_probe_block(data, 0, 10, 390, np.ones(32), nb, SITES, np.zeros(32, np.int32), polarity,
                             4.5, 30, 5.0, 0.5, 15, 6)
    assert out.sample.tolist() == [200] and out.amplitude_uv[0] == pytest.approx(50.0 * sign)


def test_artefacts_on_most_sites_are_flagged_but_a_spike_on_a_whole_neighbourhood_is_not(tmp_path):
    data = gaussian(30000, 32, sigma=8.0, seed=4)
    add_spike(data, 6000, 10.0, 150.0, 400.0)            # huge spike: every site of its neighbourhood
    data[15000:15030] += 600.0 * np.sin(np.arange(30) / 3.0)[:, None]
    rec = probe_recording(tmp_path / "p.bin", data)
    ev = detect(rec, Params())
    spike = np.abs(ev.sample - 6000) <= 10
    assert spike.sum() == 1 and not ev.artefact[spike].any()
    assert ev.artefact[np.abs(ev.sample - 15015) <= 30].all() and ev.artefact.any()


def test_dead_site_holds_no_events_and_no_weight(tmp_path):
    data, truth = spikes_on_noise(seed=5)
    data[:, 5] = 0.0
    rec = probe_recording(tmp_path / "p.bin", data)
    ev = detect(rec, Params())
    assert 5 in ev.excluded and not np.any(ev.channel == 5)
    assert np.isfinite(ev.x_um).all() and np.isfinite(ev.y_um).all()


def test_event_positions_survive_files_and_subsets(tmp_path):
    data, _ = spikes_on_noise(seed=6, count=10)
    ev = detect(probe_recording(tmp_path / "p.bin", data), Params())
    ev.write_h5(tmp_path / "e.h5")
    back = EventTable.read_h5(tmp_path / "e.h5")
    np.testing.assert_array_equal(back.y_um, ev.y_um)
    ev.write_csv(tmp_path / "e.csv")
    header = (tmp_path / "e.csv").read_text().splitlines()[0]
    assert header == "sample,time_s,channel,group,amplitude_uv,amplitude_sigma,artefact,x_um,y_um"
    rows = np.genfromtxt(tmp_path / "e.csv", delimiter=",", names=True)
    np.testing.assert_allclose(rows["x_um"], ev.x_um, atol=0.006)
    assert ev.subset(np.arange(3)).x_um.tolist() == ev.x_um[:3].tolist()


def test_event_tables_refuse_half_or_bad_positions():
    base = dict(sample=[1], channel=[0], group=[0], amplitude_uv=[-5.0], amplitude_sigma=[5.0], artefact=[False],
                rate_hz=RATE, n_samples=10, sigma_uv=[1.0], floor_sigma=4.5)
    with pytest.raises(RigsideError, match="both x_um and y_um or neither"):
        EventTable(**base, x_um=[1.0])
    with pytest.raises(RigsideError, match="same length"):
        EventTable(**base, x_um=[1.0, 2.0], y_um=[1.0, 2.0])
    with pytest.raises(RigsideError, match="positions must be finite"):
        EventTable(**base, x_um=[np.nan], y_um=[1.0]).check()


def test_wide_recordings_are_streamed_in_chunks_that_stay_in_cache():
    from rigside.core.signal.chunk_pool import CHUNK_VALUES, chunk_samples
    assert chunk_samples(1.0, 30000.0, 64) == 30000                    # 64 channels keep 1 s chunks
    assert chunk_samples(1.0, 30000.0, 384) == CHUNK_VALUES // 384 == 5461
    assert chunk_samples(0.1, 30000.0, 384) == 3000                     # a shorter chunk asked for is kept
    assert chunk_samples(1.0, 30000.0, 1 << 20, least=128) == 128      # never below the pass's least length
