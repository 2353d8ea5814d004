"""The content hash computed in its own thread beside a pass over the file.

Reference: hashlib.sha256 over the file's bytes (Python standard library).
"""

import hashlib
import threading

import pytest

from rigside.core.errors import RecordingError
from rigside.core.io.content import BLOCK, BackgroundHasher


@pytest.fixture
def data_file(tmp_path):
    p = tmp_path / "data.bin"
    p.write_bytes(bytes(range(256)) * ((2 * BLOCK + 12345) // 256))
    return p


def test_the_thread_hashes_every_byte_in_order(data_file):
    expected = "sha256:" + hashlib.sha256(data_file.read_bytes()).hexdigest()
    with BackgroundHasher(data_file) as h:
        for f in (0.1, 0.05, 0.5, 0.9):  # a target never moves back
            h.advance(f)
        assert h.finish() == expected


def test_hashing_runs_beside_the_caller(data_file):
    h = BackgroundHasher(data_file)
    h.advance(0.5)  # returns at once; the thread catches up on its own
    for _ in range(2000):
        if h._hasher._done >= h._hasher.size // 2:
            break
        threading.Event().wait(0.005)
    assert h._hasher._done >= h._hasher.size // 2
    assert h._thread.is_alive() and h._thread is not threading.current_thread()
    h.close()


def test_a_file_shrinking_meanwhile_is_an_error(data_file):
    h = BackgroundHasher(data_file)
    h.advance(0.25)
    with open(data_file, "r+b") as fh:
        fh.truncate(BLOCK)
    with pytest.raises(RecordingError, match="must keep its size while it is read"):
        h.finish()


def test_close_without_finish_ends_the_thread(data_file):
    h = BackgroundHasher(data_file)
    h.advance(0.3)
    h.close()
    h.close()
    assert not h._thread.is_alive()
