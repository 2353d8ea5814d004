"""Window usability gaps found in the trial: foreign truth files, layout dialog, exports, layout
restore, undo after reopening, save folders."""

from __future__ import annotations

import logging

import numpy as np

from tests.app.test_window_frame import write_noise


def test_a_foreign_or_broken_truth_file_is_ignored_with_a_warning(window, tmp_path, caplog):
    for name, text in (("foreign", "time,neuron\n0.1,3\n0.2,4\n"),
                       ("broken", "unit,sample,time_s\n1,abc,0.1\n")):
        rec = tmp_path / f"{name}.bin"
        write_noise(rec, 0.5, 4)
        rec.with_name(f"{name}.truth.csv").write_text(text)
        with caplog.at_level(logging.WARNING, logger="rigside"):
            assert window.open_path(str(rec))
            assert window.wait_idle(60)
        assert window.analysis_outcome == "done" and window.last_error is None
        assert window.bench.events is not None and window.bench.analysis.truth is None
        assert "ground truth ignored" in window.statusBar().currentMessage()
        assert any("ground truth ignored" in r.getMessage() for r in caplog.records)
