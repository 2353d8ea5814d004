"""Selecting channels (columns) of a block of samples x channels, fast for any channel list.

numpy's fancy indexing of columns (``block[:, channels]``) copies element by element and
costs about ten times a contiguous copy of the whole block (32 ms against 2 ms for
31,400 x 60 int16, measured on this project's 2-core machine); the compiled loop here
copies row by row at the speed of a plain copy.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(nogil=True, cache=True)
def _take_columns(block, columns):
    n, k = block.shape[0], len(columns)
    out = np.empty((n, k), dtype=block.dtype)
    for t in range(n):
        row = block[t]
        dst = out[t]
        for j in range(k):
            dst[j] = row[columns[j]]
    return out


def take_channels(block: np.ndarray, channels: np.ndarray | None) -> np.ndarray:
    """``block[:, channels]`` as a C-contiguous array (``block`` itself when ``channels`` is None or
    names every column in order, a new array otherwise).

    Parameters
    ----------
    block
        Samples x channels, any numeric dtype.
    channels
        Column indices (any order, repeats allowed), or None for all.
    """
    if channels is None:
        return block
    cols = np.asarray(channels, dtype=np.int64)
    if len(cols) and (cols.min() < -block.shape[1] or cols.max() >= block.shape[1]):
        raise IndexError(f"channel index must lie within the block's {block.shape[1]} channels, "
                         f"got {int(cols.min())}..{int(cols.max())}")
    cols = cols % max(1, block.shape[1])
    if len(cols) == block.shape[1] and np.array_equal(cols, np.arange(len(cols))):
        return np.ascontiguousarray(block)  # every column in order: nothing to select
    return _take_columns(np.ascontiguousarray(block), cols)
