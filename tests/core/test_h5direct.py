"""HDF5 files whose large arrays are written straight to the file (core/io/h5image.h5_direct): the
file reads back (with h5py, the reference reader) as the arrays it was given, its checksum from
the arrays in memory equals the checksum of what is read back, and a failed write is an OSError."""

import os
import resource
import signal
from concurrent.futures import Future

import h5py
import numpy as np
import pytest

from rigside.core.io.h5image import DIRECT_BYTES, h5_direct
from rigside.core.io.h5safe import dataset_digest, read_verified


def _arrays():
    rng = np.random.default_rng(3)
    return {"big/values": rng.normal(size=(DIRECT_BYTES // 8, 3)).astype(np.float32),   # written directly
            "big/sample": np.sort(rng.integers(0, 10**9, DIRECT_BYTES // 4)),
            "big/flag": rng.random(DIRECT_BYTES + 7) < 0.5,
            "small/x": np.arange(5, dtype=np.int32),                                 # through the library
            "small/empty": np.zeros(0, np.int64)}


def _write(path, arrays):
    path.touch()
    with h5_direct(path, libver=("v110", "latest")) as (f, store):
        f.attrs["kind"] = "test"
        for name, arr in arrays.items():
            group, leaf = name.split("/")
            store(f.require_group(group), leaf, arr)
            f[group].attrs[leaf] = len(arr)
        _, digest = read_verified(f, "", size=f.id.get_filesize(), per_dataset=True, known=arrays)
    return digest


def test_a_direct_file_reads_back_as_its_arrays_with_the_same_checksum(tmp_path):
    arrays = _arrays()
    p = tmp_path / "d.h5"
    p.write_bytes(b"x" * 5_000_000)                        # longer than the result: truncated first
    digest = _write(p, arrays)
    with h5py.File(p, "r") as f:
        assert f.attrs["kind"] == "test"
        for name, arr in arrays.items():
            back = f[name][()]
            assert back.dtype == arr.dtype and np.array_equal(back, arr)
            assert f[name].chunks is None and f[name].compression is None
            assert f[name.split("/")[0]].attrs[name.split("/")[1]] == len(arr)
        data, again = read_verified(f, p, per_dataset=True)   # hashed from the bytes read back
    assert again == digest
    assert all(dataset_digest(data[k]) == dataset_digest(v) for k, v in arrays.items())


def test_given_digests_are_used_and_must_match_the_arrays(tmp_path):
    arrays = _arrays()
    p = tmp_path / "d.h5"
    digest = _write(p, arrays)
    wrong = Future()
    wrong.set_result(b"\0" * 32)
    with h5py.File(p, "r") as f:
        assert read_verified(f, p, per_dataset=True, known=arrays)[1] == digest
        assert read_verified(f, p, per_dataset=True, known=arrays, digests={"big/values": wrong})[1] != digest


@pytest.mark.skipif(not hasattr(os, "fork"), reason="a file size limit in a child process needs fork (POSIX)")
def test_a_write_past_the_file_size_limit_is_an_oserror_and_the_process_goes_on(tmp_path):
    p = tmp_path / "limited.h5"
    pid = os.fork()
    if pid == 0:
        code = 3
        try:
            signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
            resource.setrlimit(resource.RLIMIT_FSIZE, (DIRECT_BYTES, DIRECT_BYTES))
            try:
                _write(p, _arrays())
            except OSError:
                code = 0 if h5py.File(tmp_path / "other.h5", "w", driver="core", backing_store=False) else 4
        finally:
            os._exit(code)
    _, status = os.waitpid(pid, 0)
    assert os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0
