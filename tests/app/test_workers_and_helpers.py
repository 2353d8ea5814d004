"""The job runner (newest request wins, cancel, failures as messages) and small helpers."""

from __future__ import annotations

import threading

import numpy as np
import pytest

from rigside.core.errors import RecordingError
from rigside.core.params import FilterParams
from rigside.core.progress import check, report
from rigside.core.signal.filtering import design_bandpass
from rigside.gui.channel_text import channel_list, parse_channels
from rigside.gui.model import Analysis, Workbench, noise_rate_grid
from rigside.gui.trace_data import Block, step_for, visible_envelope
from rigside.gui.workers import Runner


def slow_sum(values, gate: threading.Event, progress=None, cancel=None):
    """Waits for ``gate`` (checking for cancel), then reports and returns the sum."""
    while not gate.wait(0.005):
        check(cancel)
    report(progress, 0.5, "adding")
    return sum(values)


def failing(progress=None, cancel=None):
    raise RecordingError("recording file must exist, got 'x.bin'")


def crashing(progress=None, cancel=None):
    return 1 / 0


def test_newer_request_replaces_older(qtbot):
    runner = Runner()
    got = []
    first_gate, second_gate = threading.Event(), threading.Event()
    runner.submit("slot", "first", slow_sum, [1, 2], first_gate, on_done=got.append)
    runner.submit("slot", "second", slow_sum, [3, 4], second_gate, on_done=got.append)
    first_gate.set()
    second_gate.set()
    with qtbot.waitSignal(runner.idle, timeout=10000):
        pass
    assert got == [7]
    assert not runner.busy()


def test_cancel_and_failures_are_reported(qtbot):
    runner = Runner()
    outcomes, errors = [], []
    runner.finished.connect(lambda label, outcome: outcomes.append((label, outcome)))
    runner.error.connect(lambda label, message: errors.append((label, message)))
    gate = threading.Event()
    runner.submit("a", "waiting", slow_sum, [1], gate, on_done=lambda r: pytest.fail("cancelled job returned"))
    runner.cancel("a")
    with qtbot.waitSignal(runner.idle, timeout=10000):
        pass
    runner.submit("b", "bad file", failing)
    with qtbot.waitSignal(runner.idle, timeout=10000):
        pass
    runner.submit("c", "bug", crashing)
    with qtbot.waitSignal(runner.idle, timeout=10000):
        pass
    assert ("waiting", "cancelled") in outcomes
    assert ("bad file", "recording file must exist, got 'x.bin'") in errors
    assert any(label == "bug" and "internal error (ZeroDivisionError)" in msg for label, msg in errors)
    runner.shutdown()


def test_channel_text_round_trip():
    assert channel_list([0, 1, 2, 3, 8, 12, 13]) == "0-3, 8, 12-13"
    assert parse_channels("0-3, 8; 12-13", 16) == [0, 1, 2, 3, 8, 12, 13]
    with pytest.raises(ValueError, match="must lie in 0..15"):
        parse_channels("14-16", 16)
    with pytest.raises(ValueError, match="numbers or ranges"):
        parse_channels("a-b", 16)


def test_envelope_keeps_every_extreme():
    rng = np.random.default_rng(0)
    x = rng.normal(size=(10_000, 3)).astype(np.float32)
    lo = x[:8192].reshape(1024, 8, 3).min(axis=1)
    hi = x[:8192].reshape(1024, 8, 3).max(axis=1)
    block = Block(0, 8, (0, 1, 2), False, lo, hi)
    pos, values = visible_envelope(block, 1000, 5000, 32)
    # runs of 32 samples: min and max of each, interleaved
    first = x[992:1024]
    np.testing.assert_allclose(values[0], first.min(axis=0))
    np.testing.assert_allclose(values[1], first.max(axis=0))
    assert pos[0] == 992
    assert values.min() == x[992:5024].min() and values.max() == x[992:5024].max()
    assert step_for(1000, 1000) == 1 and step_for(30000, 1000) == 32


def test_model_emits_only_on_change():
    bench = Workbench()
    seen = []
    bench.view_changed.connect(lambda a, b: seen.append((a, b)))
    bench.set_view(0.0, 1.0)
    bench.set_view(0.0, 2.0)
    bench.set_view(0.0, 2.0)
    assert seen == [(0.0, 2.0)]
    with pytest.raises(ValueError, match="threshold scale must be one of"):
        bench.set_scale("volts")


def test_noise_only_rates_follow_the_sampled_rice_form():
    """Rice (1944/45), sampled-data form fs [Phi(-k) - Phi2(-k, -k; rho1)], recomputed here
    from scipy (rho1 by scipy.integrate.quad over scipy.signal.sosfreqz, Phi and Phi2 from
    scipy.stats), not from the function the workbench interpolates; ../shared/CHECKS.md
    section 3 prints 30.82 /s at 3 sigma and 0.828 /s at 4 sigma."""
    from scipy import stats

    from tests.core.test_rice import recomputed

    sos = design_bandpass(FilterParams(low_hz=300.0, high_hz=6000.0, order=3), 30000.0)
    bench = Workbench()
    bench.analysis = Analysis(sos=sos)
    bench.analysis.noise_grid = noise_rate_grid(sos, 30000.0, "negative")
    k = np.array([3.0, 4.0, 4.37, 5.13])              # on and between the grid's thresholds
    _, rho = recomputed(zero_phase=True)
    mvn = stats.multivariate_normal(mean=[0.0, 0.0], cov=[[1.0, rho], [rho, 1.0]])
    want = 30000.0 * (stats.norm.cdf(-k) - np.array([mvn.cdf([-x, -x]) for x in k]))
    np.testing.assert_allclose(bench.noise_rates(k), want, rtol=0.005)
    np.testing.assert_allclose(want[:2], [30.82, 0.828], rtol=0.005)
    both = noise_rate_grid(sos, 30000.0, "both")
    np.testing.assert_allclose(np.exp(both[1]) / np.exp(bench.analysis.noise_grid[1]), 2.0)
    assert bench.noise_rates(np.array([np.inf]))[0] == 0.0


def test_analysis_progress_is_one_bar_shared_with_detection(tmp_path):
    """The window's analysis and the command line's detection split the bar the same way:
    the noise estimate fills [0, NOISE_SHARE], detection the rest (common practice, no source)."""
    from rigside.core.params import Params
    from rigside.core.signal.noise import estimate_noise
    from rigside.core.signal.pipeline import NOISE_SHARE, detect
    from rigside.gui import jobs
    from tests.core.helpers import gaussian, write_raw

    rec = write_raw(tmp_path / "r.bin", gaussian(60_000, 2, 10.0))
    params = Params()
    params.run.chunk_s = 0.25
    seen = []
    jobs.analyse(rec, params, progress=lambda f, m: seen.append((round(f, 9), m)))
    noise = estimate_noise(rec, params)
    direct = []
    detect(rec, params, noise=noise, progress=lambda f, m: direct.append((round(f, 9), m)))
    rec.close()
    fractions = [f for f, _ in seen]
    assert fractions == sorted(fractions) and 0 <= fractions[0] and fractions[-1] <= 1
    assert all(f <= NOISE_SHARE for f, m in seen if m != "detecting")
    assert [x for x in seen if x[1] == "detecting"] == [x for x in direct if x[1] == "detecting"]
