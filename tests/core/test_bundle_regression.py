"""Bundle recordings without positions keep the events they had before probes joined (regression)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.signal.pipeline import detect

ROOT = Path(__file__).resolve().parents[2]
FIXTURE = ROOT / "tests" / "fixtures" / "demo_events.csv"
"""Events of the bundled demo (every event, artefacts included, default parameters) as written by
``rigside detect sample_data/demo.bin --keep-artefacts`` before site positions existed."""


def test_demo_events_are_exactly_the_ones_before_probes(tmp_path):
    # regression against the stored output of the earlier program (no outside source)
    rec = open_recording(ROOT / "sample_data" / "demo.bin")
    assert rec.positions is None
    ev = detect(rec, Params())
    assert ev.x_um is None and ev.columns[-1] == "artefact"
    ev.write_csv(tmp_path / "now.csv")
    before = np.genfromtxt(FIXTURE, delimiter=",", names=True)
    now = np.genfromtxt(tmp_path / "now.csv", delimiter=",", names=True)
    assert now.dtype.names == before.dtype.names
    for column in ("sample", "channel", "group", "artefact"):
        np.testing.assert_array_equal(now[column], before[column])
    # amplitudes to the filter's float32 rounding (BLAS and compilers differ between versions)
    np.testing.assert_allclose(now["amplitude_uv"], before["amplitude_uv"], atol=2e-3)
    np.testing.assert_allclose(now["amplitude_sigma"], before["amplitude_sigma"], atol=2e-4)
