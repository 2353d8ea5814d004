"""The trace view draws zoomed-out filtered traces from the overview and short spans from samples."""

from __future__ import annotations

import numpy as np

from rigside.core.signal.overview import cache_path
from rigside.gui import jobs

RATE, SECONDS, CHANNELS = 30000.0, 20.0, 8


def write_recording(path, seed: int) -> None:
    rng = np.random.default_rng(seed)
    rng.normal(0, 60, size=(int(SECONDS * RATE), CHANNELS)).astype(np.int16).tofile(path)
    path.with_name(path.stem + ".rigside.toml").write_text(
        f"[recording]\nchannels = {CHANNELS}\nrate_hz = {RATE}\ngain_uv = 0.195\n")


def count_reads(rec, monkeypatch) -> list[int]:
    """Samples x channels read from the recording from now on (every read goes through read_stored)."""
    read = []
    original = rec.read_stored

    def counted(start, stop, channels=None):
        block = original(start, stop, channels)
        read.append(block.size)
        return block

    monkeypatch.setattr(rec, "read_stored", counted)
    return read


def open_and_wait(window, path, builders: list) -> None:
    assert window.open_path(str(path))
    assert window.wait_idle(120)
    builders.append(window._overview_builder)


def test_full_file_zoom_draws_from_the_overview_and_a_short_zoom_from_samples(window, tmp_path, monkeypatch):
    path = tmp_path / "long.bin"
    write_recording(path, 0)
    assert window.open_path(str(path))
    assert window.wait_idle(120)
    b, traces = window.bench, window.traces
    ov = b.overview
    assert ov is not None and ov.path == cache_path(b.recording, b.analysis.params.filter)
    b.show_channels(range(CHANNELS), "all channels")
    assert window.wait_idle(30)                                 # the waveform panel's snippets
    read = count_reads(b.recording, monkeypatch)

    b.set_view(0.0, b.recording.duration_s)
    assert window.wait_idle(30)
    assert abs(b.view[1] - b.recording.duration_s) < 1e-9      # the whole file may be shown
    assert sum(read) == 0                                       # nothing read from the recording
    a, z = traces.visible_samples()
    step = traces._step(a, z)
    assert traces.block.step == ov.level_for(step) > 1
    _, lo, hi = ov.read(traces.block.step, 0, b.recording.n_samples)
    np.testing.assert_array_equal(traces.block.lo, lo)
    np.testing.assert_array_equal(traces.block.hi, hi)
    x, y = traces.curve.getData()
    drawn = np.isfinite(x)                                      # one gap point ends each lane
    assert drawn.sum() == 2 * len(lo) * CHANNELS and len(x) == drawn.sum() + CHANNELS
    assert np.all(np.isfinite(y[drawn])) and np.all(np.isnan(y[~drawn]))

    b.set_view(10.0, 10.05)
    assert window.wait_idle(30)
    assert traces.block.step == 1 and traces.block.step < ov.bins[0]
    assert 0 < sum(read) <= (3 * 0.05 * RATE + 2 * traces.source.bandpass.margin + 64) * CHANNELS
    a, z = traces.visible_samples()
    x, _ = traces.curve.getData()
    assert np.isfinite(x).sum() == (z - a) * CHANNELS            # one point per sample


def test_the_cached_overview_is_reused_until_the_recording_changes(window, tmp_path, monkeypatch):
    path = tmp_path / "long.bin"
    write_recording(path, 0)
    builders: list = []
    open_and_wait(window, path, builders)
    first = window.bench.overview.path
    assert builders[-1] is not None and builders[-1].path == first      # built by the detection pass
    stamp = first.stat().st_mtime_ns

    open_and_wait(window, path, builders)
    assert builders[-1] is None                                           # no builder: the cache was used
    assert window.bench.overview.path == first and first.stat().st_mtime_ns == stamp

    write_recording(path, 1)                                             # same size, other content
    open_and_wait(window, path, builders)
    assert builders[-1] is not None
    second = window.bench.overview.path
    assert second != first and second.exists() and not first.exists()


def test_the_rebuild_job_replaces_an_overview_the_content_hash_refutes(window, tmp_path, monkeypatch):
    path = tmp_path / "long.bin"
    write_recording(path, 0)
    builders: list = []
    open_and_wait(window, path, builders)
    real = jobs.analyse

    def edited_content(rec, *args, progress=None, cancel=None):
        result = real(rec, *args, progress=progress, cancel=cancel)
        rec.content_hash = "xxh3-128:" + "1" * 32   # as if a byte the quick fingerprint skips had changed
        return result

    monkeypatch.setattr(jobs, "analyse", edited_content)
    rebuilt = []
    real_overview = jobs.overview

    def recorded(*args, **kwargs):
        rebuilt.append(real_overview(*args, **kwargs))
        return rebuilt[-1]

    monkeypatch.setattr(jobs, "overview", recorded)
    first = window.bench.overview.path
    stamp = first.stat().st_mtime_ns
    open_and_wait(window, path, builders)
    assert builders[-1] is None                        # the cached overview was shown at first
    assert len(rebuilt) == 1 and rebuilt[0].path == first
    assert first.stat().st_mtime_ns != stamp           # written again by the rebuild job
    ov = window.bench.overview
    assert ov is not None and ov.path == first and ov.content_hash == window.bench.recording.content_hash
