"""The content hash computed in its own thread beside a pass over the file.

Reference: xxhash.xxh3_128 over the file's bytes (the xxhash package, bindings of the XXH3
reference implementation).
"""

import threading

import pytest
import xxhash

from rigside.core.errors import RecordingError
from rigside.core.io.content import BLOCK, BackgroundHasher


@pytest.fixture
def data_file(tmp_path):
    p = tmp_path / "data.bin"
    p.write_bytes(bytes(range(256)) * ((2 * BLOCK + 12345) // 256))
    return p


def test_the_thread_hashes_every_byte_in_order(data_file):
    expected = "xxh3-128:" + xxhash.xxh3_128(data_file.read_bytes()).hexdigest()
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
