"""The overlap pass fits its candidate finds in bounded batches per group as the chunks come in: the
result equals fitting every find of a group at once (the pass before batching held them all)."""

import numpy as np

from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.signal import overlaps
from rigside.core.signal.event_pass import detect_with_features
from rigside.core.synthetic.synth import write_synth
from rigside.core.units.first_pass import first_pass


def test_batched_fits_equal_one_fit_of_all_finds(tmp_path, monkeypatch):
    write_synth(tmp_path / "demo.bin", seconds=6, channels=16, seed=3)
    rec = open_recording(tmp_path / "demo.bin")
    params = Params()
    params.run.chunk_s = 0.5                 # 12 chunks: finds come in many small parts
    params.cluster.min_unit_events = 5
    events, features = detect_with_features(rec, params)
    assignments = first_pass(events, features, params.cluster).assignments
    monkeypatch.setattr(overlaps, "FIT_BATCH", 10 ** 9)      # every find of a group fitted at once
    whole = overlaps.recover_overlaps(rec, events, features, assignments, params)
    monkeypatch.setattr(overlaps, "FIT_BATCH", 1)            # each chunk's finds fitted on their own
    parts = overlaps.recover_overlaps(rec, events, features, assignments, params)
    assert len(whole.unit) >= 10 and len(whole.moved) and len(np.unique(whole.events.group)) > 1
    for name in ("sample", "channel", "group", "amplitude_uv", "amplitude_sigma", "artefact"):
        np.testing.assert_array_equal(getattr(parts.events, name), getattr(whole.events, name))
    np.testing.assert_array_equal(parts.unit, whole.unit)
    np.testing.assert_array_equal(parts.moved, whole.moved)
    np.testing.assert_array_equal(parts.moved_unit, whole.moved_unit)
    # the PCA projection is a matrix product whose summation order may follow the batch size (BLAS)
    np.testing.assert_allclose(parts.features, whole.features, rtol=1e-5, atol=1e-4)
