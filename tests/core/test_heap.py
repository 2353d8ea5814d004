"""Free heap memory given back to the system (glibc's malloc_trim, documented in the GNU C Library
manual: it releases free memory at the top of the heap and in the middle of every arena)."""

from __future__ import annotations

import platform

import numpy as np
import psutil
import pytest

from rigside.core.heap import give_back


@pytest.mark.skipif(platform.libc_ver()[0] != "glibc", reason="malloc_trim is glibc's")
def test_freed_small_blocks_go_back_to_the_system():
    proc = psutil.Process()
    blocks = [np.ones(2000) for _ in range(40000)]     # 16 kB each, under the mmap threshold: heap blocks
    kept = blocks[::500]                                # a few stay, pinning the heap's top
    del blocks
    before = proc.memory_info().rss
    assert give_back()
    after = proc.memory_info().rss
    assert before - after > 200e6                       # most of the 640 MB freed goes back
    assert all(k[0] == 1.0 for k in kept)
