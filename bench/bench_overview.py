"""Trace overview: its cost inside detection, and trace-view redraws at any zoom of a long recording.

Prints, measured in the same run:
- detection time (in process, noise measured once beforehand) without and with the overview
  built and cached, and their ratio (target: the overview adds under 10 %);
- the trace view's redraw (set the view, fetch, reduce, draw, and let the event loop paint
  every panel the change made dirty; offscreen, all channels shown) at several zoom levels
  from the whole file down to 50 ms, against a baseline that reads and filters the visible
  slice and reduces it to one min/max pair per pixel column with numpy, drawn on the same
  curve (target: every zoom under 100 ms once the overview exists). Where the view is too
  long for samples at once, the time until the background read replaces the overview's bins
  is printed too.

Run: python bench/bench_overview.py [--seconds 3600] [--channels 64] [--baseline-max 600]
     [--recording PATH]   (an existing recording, read only, instead of a synthesised one)
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from PySide6.QtCore import QSettings  # noqa: E402
from PySide6.QtWidgets import QApplication  # noqa: E402

from rigside.core.io.recording import open_recording  # noqa: E402
from rigside.core.params import Params  # noqa: E402
from rigside.core.signal.filtering import BandPass  # noqa: E402
from rigside.core.signal.noise import estimate_noise  # noqa: E402
from rigside.core.signal.overview import OverviewBuilder  # noqa: E402
from rigside.core.signal.pipeline import detect  # noqa: E402

SPANS_S = (None, 600.0, 60.0, 10.0, 2.0, 0.5, 0.05)   # None: the whole file


def synth(folder: Path, seconds: float, channels: int) -> Path:
    out = folder / "long.bin"
    subprocess.run([sys.executable, "-m", "rigside", "synth", str(out), "--seconds", str(seconds),
                    "--channels", str(channels), "--quiet"], cwd=ROOT, check=True)
    return out


def detection_times(rec, params, noise, repeats: int) -> tuple[list[float], list[float], OverviewBuilder, object]:
    plain, with_ov, builder = [], [], None
    for _ in range(repeats):
        t = time.perf_counter()
        events = detect(rec, params, noise=noise)
        plain.append(time.perf_counter() - t)
        t = time.perf_counter()
        builder = OverviewBuilder(rec, params.filter)
        detect(rec, params, noise=noise, overview=builder)
        builder.save()
        with_ov.append(time.perf_counter() - t)
    return plain, with_ov, builder, events


def redraw_ms(app, win, t0: float, t1: float) -> tuple[float, float | None]:
    """Milliseconds to redraw at ``[t0, t1)``, and until background samples replaced it (or None)."""
    t = time.perf_counter()
    win.bench.set_view(t0, t1)
    app.processEvents()                       # every panel the change made dirty paints here
    first = 1000 * (time.perf_counter() - t)
    if not win.runner.busy("traces"):
        return first, None
    win.wait_idle(600)
    app.processEvents()
    return first, 1000 * (time.perf_counter() - t)


def baseline_ms(win, bandpass: BandPass, t0: float, t1: float) -> float:
    """Read and filter the slice, one min/max pair per pixel column (numpy), draw and paint."""
    traces, rec = win.traces, win.bench.recording
    view = traces.plot.viewport()
    t = time.perf_counter()
    a, z = int(t0 * rec.rate_hz), min(rec.n_samples, int(np.ceil(t1 * rec.rate_hz)))
    y = bandpass.read(a, z)
    cols = max(1, min(z - a, view.width()))
    per = -(-(z - a) // cols)
    pad = np.repeat(y[-1:], cols * per - (z - a), axis=0)     # repeating the last sample changes no min/max
    body = np.vstack([y, pad]).reshape(cols, per, y.shape[1])
    lo, hi = body.min(axis=1), body.max(axis=1)
    vals = np.empty((2 * cols, y.shape[1]), dtype=np.float32)
    vals[0::2], vals[1::2] = lo, hi
    x = np.repeat(a + np.arange(cols) * per, 2) / rec.rate_hz
    yy = (vals + traces.offsets[None, :]).T.ravel()
    connect = np.ones(len(yy), dtype=bool)
    connect[2 * cols - 1::2 * cols] = False
    traces.curve.setData(np.tile(x, y.shape[1]), yy, connect=connect)
    QApplication.processEvents()
    return 1000 * (time.perf_counter() - t)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=600.0)
    ap.add_argument("--channels", type=int, default=64)
    ap.add_argument("--repeats", type=int, default=1, help="detection runs of each kind")
    ap.add_argument("--baseline-max", type=float, default=600.0,
                    help="longest span (s) the baseline reads (it filters the whole slice)")
    ap.add_argument("--recording", type=Path, help="time this recording (read only) instead of a synthetic one")
    args = ap.parse_args()
    tmp = tempfile.TemporaryDirectory()
    folder = Path(tmp.name)
    os.environ["RIGSIDE_CACHE_DIR"] = str(folder / "cache")
    QSettings.setDefaultFormat(QSettings.Format.IniFormat)
    QSettings.setPath(QSettings.Format.IniFormat, QSettings.Scope.UserScope, str(folder / "settings"))
    app = QApplication.instance() or QApplication([])
    from rigside.gui.window import MainWindow

    t = time.perf_counter()
    path = args.recording or synth(folder, args.seconds, args.channels)
    rec = open_recording(path)
    made = "given" if args.recording else f"synthesised in {time.perf_counter() - t:.0f} s"
    print(f"recording: {rec.n_samples / rec.rate_hz:g} s x {rec.n_channels} channels, "
          f"{path.stat().st_size / 1e9:.2f} GB ({made}); load average {os.getloadavg()[0]:.1f} on "
          f"{os.cpu_count()} cores (shared machine: figures vary between runs)")
    params = Params()
    noise = estimate_noise(rec, params)
    plain, with_ov, builder, events = detection_times(rec, params, noise, args.repeats)
    size_mb = builder.path.stat().st_size / 1e6
    p, w = min(plain), min(with_ov)
    print(f"\ndetection in process: {p:7.2f} s without the overview, {w:7.2f} s with it built and cached "
          f"-> ratio {w / p:.3f} ({100 * (w / p - 1):+.1f} %; target under +10 %)")
    print(f"overview: finest bin {builder.bin} samples, {len(builder.levels())} levels, {size_mb:.1f} MB on disk")

    win = MainWindow(interactive=False)
    win.resize(1600, 1000)
    win.show()
    win.open_path(str(path))
    win.runner.shutdown()                     # the cached overview is loaded; skip the window's own detection
    win.bench.set_events(noise, events)
    win.runner.shutdown()
    win.bench.show_channels(range(rec.n_channels), "all channels")
    win.runner.shutdown()
    assert win.bench.overview is not None, "the window must find the cached overview"
    bandpass = BandPass(rec, params.filter)
    redraw_ms(app, win, 0.0, 1.0)             # warm-up
    baseline_ms(win, bandpass, 0.0, 1.0)
    dur = rec.duration_s
    print(f"\ntrace view redraw, {rec.n_channels} channels shown, view {win.traces.plot.viewport().width()} px wide "
          f"(median / max of 5 positions)")
    for span in sorted({dur if s is None or s > dur else s for s in SPANS_S}, reverse=True):
        starts = [0.0] if span >= dur else list(np.linspace(0.0, dur - span, 5))
        ours, later = [], []
        for t0 in starts:
            first, done = redraw_ms(app, win, t0, t0 + span)
            ours.append(first)
            if done is not None:
                later.append(done)
        win.runner.shutdown()
        line = f"  {span:8.3g} s: {np.median(ours):7.1f} / {max(ours):7.1f} ms"
        if later:
            line += f" (overview bins first; samples after {np.median(later):7.1f} ms in the background)"
        if span <= args.baseline_max:
            base = [baseline_ms(win, bandpass, t0, t0 + span) for t0 in starts[:3]]
            line += f"; baseline {np.median(base):8.1f} ms -> ratio {np.median(base) / np.median(ours):6.1f} x"
        else:
            line += f"; baseline not run (it would filter {span:g} s of {rec.n_channels} channels)"
        print(line + f"  [{'met' if max(ours) < 100 else 'NOT met'}]")
        win.bench.set_view(0.0, 1.0)
        win.runner.shutdown()
    win.close()
    rec.close()
    tmp.cleanup()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
