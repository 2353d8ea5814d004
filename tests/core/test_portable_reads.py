"""Reads without the Unix-only positional calls (as on Windows): the same samples, the same
hash, and detection still streams the file in chunks."""

import os

import numpy as np
import xxhash

from rigside.core.io.content import content_hash
from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.signal.pipeline import detect
from rigside.core.synthetic.synth import write_synth


def _without_positional_calls(monkeypatch):
    for name in ("preadv", "pread"):
        if hasattr(os, name):
            monkeypatch.delattr(os, name)


def test_samples_hash_and_events_are_the_same_without_pread(tmp_path, monkeypatch):
    path = tmp_path / "r.bin"
    write_synth(path, seconds=3.0, channels=8, seed=4)
    rec = open_recording(path)
    stored = rec.read_stored(1234, 9876)
    params = Params()
    events = detect(rec, params)
    digest = content_hash(path)
    rec.close()
    assert digest == "xxh3-128:" + xxhash.xxh3_128(path.read_bytes()).hexdigest()   # xxhash, the reference

    _without_positional_calls(monkeypatch)
    assert not hasattr(os, "pread") and not hasattr(os, "preadv")
    rec = open_recording(path)
    reads = []
    original = type(rec).read_stored

    def counted(self, start, stop, channels=None):
        reads.append(stop - start)
        return original(self, start, stop, channels)
    monkeypatch.setattr(type(rec), "read_stored", counted)
    np.testing.assert_array_equal(original(rec, 1234, 9876), stored)
    again = detect(rec, params)
    assert content_hash(path) == digest
    np.testing.assert_array_equal(again.sample, events.sample)
    np.testing.assert_array_equal(again.channel, events.channel)
    # streamed: no single read covers the whole file
    assert reads and max(reads) < rec.n_samples
    rec.close()
