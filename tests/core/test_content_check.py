"""A changed recording is detected even where the quick fingerprint does not look.

References for the hash: xxhash.xxh3_128 over the file's bytes (the xxhash package, bindings of the
XXH3 reference implementation); for files written with the former hash, hashlib.sha256 (Python
standard library).
"""

import dataclasses
import hashlib

import pytest
import xxhash

from rigside.core.errors import RecordingError
from rigside.core.io.content import content_hash
from rigside.core.io.recording import open_recording
from rigside.core.params import Params
from rigside.core.runs import sort as sort_run
from rigside.core.runs.sort import checkpoint_path, run_sort, sort_recording
from rigside.core.signal.pipeline import detect
from rigside.core.synthetic.synth import write_synth
from rigside.core.units.session import RecordingChanged, check_recording_content, file_fingerprint, load_session

GAP_BYTE = 1_500_000
"""In a 4.8 MB file the fingerprint reads 0-1 MiB, the middle MiB and the last MiB; this byte is in none."""


@pytest.fixture(scope="module")
def rec_path(tmp_path_factory):
    p = tmp_path_factory.mktemp("content") / "r.bin"
    write_synth(p, seconds=10, channels=8, seed=6)
    assert p.stat().st_size == 4_800_000
    return p


def edit_in_the_gap(path):
    """Change one sample where the quick fingerprint does not look; check that it does not."""
    before = file_fingerprint(path)
    with open(path, "r+b") as fh:
        fh.seek(GAP_BYTE)
        old = fh.read(1)
        fh.seek(GAP_BYTE)
        fh.write(bytes([old[0] ^ 0x40]))
    assert file_fingerprint(path) == before


def test_detection_hashes_the_whole_content(rec_path):
    rec = open_recording(rec_path)
    detect(rec, Params())
    expected = "xxh3-128:" + xxhash.xxh3_128(rec_path.read_bytes()).hexdigest()
    assert rec.content_hash == expected == content_hash(rec_path)
    rec.close()


def test_a_stored_hash_is_checked_with_its_own_algorithm(rec_path):
    legacy = "sha256:" + hashlib.sha256(rec_path.read_bytes()).hexdigest()
    assert content_hash(rec_path, like=legacy) == legacy
    assert content_hash(rec_path, like="xxh3-128:" + "0" * 32).startswith("xxh3-128:")
    with pytest.raises(RecordingError, match="must start with one of xxh3-128:, sha256:"):
        content_hash(rec_path, like="md5:0123")


def test_a_session_written_with_the_former_hash_is_checked_with_it(rec_path, tmp_path):
    p = tmp_path / "r.bin"
    p.write_bytes(rec_path.read_bytes())
    (tmp_path / "r.rigside.toml").write_text((rec_path.parent / "r.rigside.toml").read_text())
    rec = open_recording(p)
    run_sort(rec, Params(), tmp_path / "s.h5")
    rec.close()
    session = load_session(tmp_path / "s.h5")            # as a session of the former version holds it:
    session.recording = dataclasses.replace(
        session.recording, content_hash="sha256:" + hashlib.sha256(p.read_bytes()).hexdigest())
    check_recording_content(session)                     # unchanged: passes
    edit_in_the_gap(p)
    with pytest.raises(RecordingChanged, match="changed"):
        check_recording_content(session)


def test_a_session_made_from_a_file_edited_since_is_refused(rec_path, tmp_path):
    p = tmp_path / "r.bin"
    p.write_bytes(rec_path.read_bytes())
    (tmp_path / "r.rigside.toml").write_text((rec_path.parent / "r.rigside.toml").read_text())
    rec = open_recording(p)
    run_sort(rec, Params(), tmp_path / "s.h5")
    rec.close()
    session = load_session(tmp_path / "s.h5")
    assert session.recording.content_hash.startswith("xxh3-128:")
    check_recording_content(session)                     # unchanged: passes
    edit_in_the_gap(p)
    session = load_session(tmp_path / "s.h5")            # the quick check cannot see the edit
    with pytest.raises(RecordingChanged, match="changed"):
        check_recording_content(session)


def test_resume_does_not_reuse_a_checkpoint_of_an_edited_file(rec_path, tmp_path, monkeypatch):
    p = tmp_path / "r.bin"
    p.write_bytes(rec_path.read_bytes())
    (tmp_path / "r.rigside.toml").write_text((rec_path.parent / "r.rigside.toml").read_text())
    ckpt = checkpoint_path(tmp_path / "s.h5")
    rec = open_recording(p)
    sort_recording(rec, Params(), ckpt)
    rec.close()
    calls = []
    real_detect = sort_run.detect_with_features
    monkeypatch.setattr(sort_run, "detect_with_features", lambda *a, **k: calls.append(1) or real_detect(*a, **k))
    rec = open_recording(p)
    sort_recording(rec, Params(), ckpt, resume=True)
    assert calls == []                                    # same file: the checkpoint is reused
    edit_in_the_gap(p)
    sort_recording(rec, Params(), ckpt, resume=True)
    assert calls == [1]                                   # edited file: detection runs again
    rec.close()
