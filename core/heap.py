"""Free heap memory given back to the system while a long pass runs (where the C library can).

glibc keeps freed blocks in each thread's arena for reuse, so a chunked pass over a recording, whose
worker threads allocate and free a block's worth of arrays per chunk, holds far more than it uses
(at 64 channels x 600 s, about 200 MB of 430 MB; ``malloc_trim`` is documented in glibc's manual).
Other C libraries return memory their own way and have no such call: there is nothing to do.
"""

from __future__ import annotations

import ctypes


def _trim_call():
    try:
        libc = ctypes.CDLL(None)
    except (OSError, TypeError):   # no process-wide C library handle (Windows)
        return None
    return getattr(libc, "malloc_trim", None)


_TRIM = _trim_call()


def give_back() -> bool:
    """Return free heap pages to the system (glibc's ``malloc_trim(0)``); False where there is no such call."""
    if _TRIM is None:
        return False
    _TRIM(0)
    return True
