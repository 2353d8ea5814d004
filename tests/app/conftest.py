"""Fixtures for window tests: temporary settings, cached demo analysis, leak checks."""

from __future__ import annotations

import gc
import shutil
import threading
import time
from pathlib import Path

import numpy as np
import psutil
import pytest
import scipy.linalg.blas as scipy_blas
from PySide6.QtCore import QSettings
from PySide6.QtWidgets import QApplication, QWidget

from rigside.cli.main import main
from rigside.core.io.recording import open_recording
from rigside.core.params import ClusterParams, Params
from rigside.core.units.clustering import cluster_features
from rigside.gui import jobs
from rigside.gui.window import MainWindow
from rigside.gui.workers import running_jobs
from rigside.sample_data import demo_path, probe_demo_path

_CACHE: dict = {}


@pytest.fixture(autouse=True)
def temporary_settings(tmp_path, qapp, monkeypatch):
    """Every test keeps window settings and cached overviews in its own folder, never the user's."""
    monkeypatch.setenv("RIGSIDE_CACHE_DIR", str(tmp_path / "cache"))
    QSettings.setDefaultFormat(QSettings.Format.IniFormat)
    QSettings.setPath(QSettings.Format.IniFormat, QSettings.Scope.UserScope, str(tmp_path / "settings"))
    yield


def _threads() -> list[str]:
    """Names of the process's threads, leaving out Qt's self-expiring global pool."""
    names = []
    for t in psutil.Process().threads():
        try:
            with open(f"/proc/self/task/{t.id}/comm") as fh:
                name = fh.read().strip()
        except OSError:
            continue
        # Qt's self-expiring global pool; and threads named "Job": a native library's thread pool
        # started from a job thread inherits that name and lives on (seen here after a first pass
        # in the window), while a job itself still running is caught by running_jobs()
        if name not in ("Thread (pooled)", "Job"):
            names.append(name)
    return sorted(names)


@pytest.fixture(scope="session", autouse=True)
def qt_started(qapp):
    """Show one widget so that Qt's own lasting threads exist before any leak baseline."""
    w = QWidget()
    w.show()
    QApplication.processEvents()
    w.close()
    yield


# the offscreen platform cannot resize native windows to hints; nothing of ours is wrong then
KNOWN_QT_MESSAGES = ("This plugin does not support propagateSizeHints()",)


@pytest.fixture(autouse=True)
def no_qt_warnings(qtlog):
    """Fail a test on any Qt warning or error other than the offscreen platform's known one."""
    yield
    bad = [r.message for r in qtlog.records
           if r.type.name in ("QtWarningMsg", "QtCriticalMsg", "QtFatalMsg")
           and not r.message.startswith(KNOWN_QT_MESSAGES)]
    assert not bad, f"Qt reported: {bad}"


def _extra_python(before: set) -> list[str]:
    # dummy entries only record that a Qt thread once ran Python code; the OS count covers them
    return [t.name for t in threading.enumerate()
            if t.ident not in before and not isinstance(t, threading._DummyThread)]


def _wake_blas_pools() -> None:
    """Bring the BLAS thread pools of NumPy and SciPy (each wheel ships its own OpenBLAS) to their full size.

    Setting a limit of one thread (``core/signal/chunk_pool.single_threaded_pools``, as an in-process
    sort does) ends a pool's worker threads, and restoring the limit starts them again only at the
    next large enough BLAS call. Without this, a test after an in-process sort that made such a call on
    the main thread was charged with the library's own workers coming back (seen as one extra thread
    named like the main thread); with it, the baseline holds the pools as they stand at rest."""
    a = np.ones((256, 256))
    a @ a
    scipy_blas.dgemm(1.0, a, a)


@pytest.fixture(autouse=True)
def no_leaks(qapp, qt_started):
    """Fail a test that leaves a visible window, a running job or another thread behind."""
    _wake_blas_pools()
    before = _threads()
    python_before = {t.ident for t in threading.enumerate()}
    yield
    for _ in range(3):
        QApplication.processEvents()
        gc.collect()
    visible = [w for w in QApplication.topLevelWidgets() if w.isVisible()]
    assert not visible, f"test left windows open: {[type(w).__name__ for w in visible]}"
    assert not running_jobs(), "test left background jobs running"
    # a finished job's thread exits a moment after it reports (later still on a loaded machine):
    # give threads up to 5 s to end before calling them leaked
    deadline = time.monotonic() + 5.0
    while time.monotonic() < deadline and (len(_threads()) > len(before) or _extra_python(python_before)):
        QApplication.processEvents()
        time.sleep(0.02)
    extra = _extra_python(python_before)
    assert not extra, f"test left Python threads running: {extra}"
    after = _threads()
    assert len(after) <= len(before), f"test left threads running: {before} before, {after} after"


def demo_analysis():
    """Noise, events, truth and features of the demo, computed once per session."""
    if not _CACHE:
        rec = open_recording(demo_path())
        params = Params()
        params.detect.floor_sigma = jobs.LOOKUP_FLOOR_SIGMA
        noise, events, truth = jobs.analyse(rec, params, rec.truth_path())
        feats = jobs.features(rec, events, params)
        rec.close()
        _CACHE.update(noise=noise, events=events, truth=truth, features=feats, content_hash=rec.content_hash)
    return _CACHE


@pytest.fixture
def window(qtbot):
    """A shown, empty workbench window, closed (and its jobs stopped) after the test."""
    win = MainWindow()
    qtbot.addWidget(win)
    win.show()
    yield win
    win.close()


@pytest.fixture
def demo_window(window, monkeypatch):
    """The window with the demo open, its long steps answered from the session cache."""
    cache = demo_analysis()
    def cached_analysis(rec, *a, progress=None, cancel=None):
        rec.content_hash = cache["content_hash"]      # what detection computes (tests open copies of the demo)
        return cache["noise"], cache["events"], cache["truth"]
    monkeypatch.setattr(jobs, "analyse", cached_analysis)
    monkeypatch.setattr(jobs, "features", lambda *a, progress=None, cancel=None: cache["features"])
    assert window.open_demo()
    assert window.wait_idle(60)
    assert window.bench.events is cache["events"]
    return window


def visible_passing_times(win, thresholds_sigma) -> np.ndarray:
    """What the core says should be marked in the trace view at these thresholds."""
    ev = win.bench.events
    a, z = win.traces.visible_samples()
    keep = ev.mask(threshold_sigma=thresholds_sigma)
    keep &= (ev.sample >= a) & (ev.sample < z) & np.isin(ev.channel, win.bench.shown_channels)
    return ev.sample[keep] / ev.rate_hz


def copy_sample(src: Path, folder: Path) -> Path:
    """A copy of a bundled recording and its side files in ``folder`` (made if missing); its path."""
    folder.mkdir(parents=True, exist_ok=True)
    for p in src.parent.glob(src.stem + ".*"):
        shutil.copy(p, folder / p.name)
    return folder / src.name


def sorted_copy(src: Path, folder: Path, session_name: str) -> tuple[Path, Path]:
    """A copy of a bundled recording and the session `rigside sort` wrote of it, both in ``folder``."""
    rec, session = copy_sample(src, folder), folder / session_name
    assert main(["sort", str(rec), "--session", str(session), "--quiet"]) == 0
    return rec, session


@pytest.fixture(scope="session")
def probe_session_file(tmp_path_factory):
    """A copy of the probe demo and the session `rigside sort` wrote of it (sorted once for every probe
    window test, before any test's thread count is taken)."""
    session = sorted_copy(probe_demo_path(), tmp_path_factory.mktemp("probe"), "probe.rigside.h5")[1]
    # the probe's regions are clustered in worker processes, so the numeric libraries' thread pools of
    # this process would start in the test (the window's first fits) and count as left behind: one small
    # clustering here starts them, as the sorts of one group in this process do for the other tests
    cluster_features(np.random.default_rng(0).normal(size=(400, 3)), ClusterParams())
    return session


@pytest.fixture
def probe_session(window, probe_session_file):
    """The window with the sorted probe demo's session open (its autosave timer stopped)."""
    window.units.files.timer.stop()
    assert window.open_path(str(probe_session_file)) and window.wait_idle(60)
    return window
