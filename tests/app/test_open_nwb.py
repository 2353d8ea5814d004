"""Opening an NWB recording in the window: its electrode groups are the channel groups, several
series are offered as a choice, and detection runs on it (files written with pynwb, invented data)."""

from __future__ import annotations

import numpy as np
import pytest

from rigside.gui.dialogs.hdf5_dataset import DatasetDialog

pytest.importorskip("pynwb")
from tests.core.nwb_files import write_nwb  # noqa: E402 (needs pynwb)


def recording(seconds: float = 1.0) -> np.ndarray:
    x = np.random.default_rng(5).normal(0, 100, (int(30000 * seconds), 8))
    x[3000::3000, 2] -= 3000.0                                         # a spike every 0.1 s on channel 2
    return np.round(x).astype(np.int16)


def test_an_nwb_file_opens_with_its_electrode_groups(window, tmp_path):
    path = write_nwb(tmp_path / "rig.nwb", recording(), conversion=0.195e-6, groups=[[0, 1, 2, 3], [4, 5, 6, 7]])
    assert window.open_path(str(path))
    assert window.wait_idle(60)
    rec = window.bench.recording
    assert type(rec).__name__ == "NWBRecording" and rec.group_names == ["tt0", "tt1"]
    events = window.bench.events
    assert events is not None
    on_two = np.sort(events.sample[events.channel == 2])
    assert set(range(3000, 30000, 3000)) <= set(on_two.tolist())       # every planted spike found there
    assert "rig.nwb" in window.windowTitle()


def test_several_series_are_offered_as_a_choice(window, tmp_path, monkeypatch):
    path = write_nwb(tmp_path / "two.nwb", recording(0.5), series=("probe_a", "probe_b"))
    offered, asked = [], []

    def choose(dialog):
        asked.append(dialog.windowTitle())
        offered.extend(dialog.choice.itemText(i) for i in range(dialog.choice.count()))
        dialog.choice.setCurrentText("acquisition/probe_b")
        return DatasetDialog.DialogCode.Accepted

    monkeypatch.setattr(DatasetDialog, "exec", choose)
    assert window.open_path(str(path))
    assert offered == ["acquisition/probe_a", "acquisition/probe_b"] and asked == ["Which series is the recording?"]
    assert window.bench.recording.series == "acquisition/probe_b"
    assert window.wait_idle(60)
    monkeypatch.setattr(DatasetDialog, "exec", lambda d: DatasetDialog.DialogCode.Rejected)
    assert not window.open_path(str(path))
