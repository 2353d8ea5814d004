"""A flat channel in the window: named on its trace lane, no events counted on it."""

from __future__ import annotations

import numpy as np

from tests.app.test_trace_spike_rows import axis_labels


def test_a_flat_channel_is_marked_on_the_traces_and_holds_no_events(window, tmp_path):
    rng = np.random.default_rng(5)
    x = rng.normal(0, 60, size=(30000, 4)).astype(np.int16)
    x[::300, 0] -= 900                      # spikes on channel 0
    x[:, 2] = 41                            # all samples equal: a dead wire with a DC offset
    path = tmp_path / "flat.bin"
    x.tofile(path)
    path.with_name("flat.rigside.toml").write_text("[recording]\nchannels = 4\nrate_hz = 30000.0\n")
    assert window.open_path(str(path))
    assert window.wait_idle(60) and window.analysis_outcome == "done"
    events = window.bench.events
    assert events.excluded == {2: "dead"}
    assert not np.any(events.channel == 2) and np.sum(events.channel == 0) >= 90
    labels = axis_labels(window.traces)
    assert "ch 2 · dead, left out" in labels and "ch 0" in labels
    model = window.panels["threshold"].table_model
    assert model.data(model.index(2, 5)) == "0" and model.data(model.index(2, 8)) == "dead"
