"""Fast CSV text of numeric tables, byte for byte what Python's own formatting writes.

A table is a list of columns: ``("int", values)`` (written like ``str(int(v))``),
``("fixed", values, decimals)`` (written like ``format(float(v), f".{decimals}f")``: correctly
rounded, ties to even, ``-0.000`` for small negatives, ``nan``/``inf``) and
``("text", codes, words)`` (``words[code]``). Rows are formatted in blocks by a compiled kernel
that converts each double exactly (its integer mantissa times ``10**decimals`` in two 64-bit
halves), so no intermediate rounding can change a digit. A block holding a number too large for
that exact path is formatted by Python instead, with the same result.
"""

from __future__ import annotations

import math
from typing import BinaryIO, Sequence

import numba
import numpy as np

BLOCK_ROWS = 1 << 16
"""Rows formatted per block."""

_INT, _FIXED, _TEXT = 0, 1, 2
_MAX_DECIMALS = 7
_LIMIT = {d: min(2.0 ** 52, 2.0 ** 62 / 10 ** d) for d in range(_MAX_DECIMALS + 1)}
"""Largest magnitude the kernel formats exactly for each number of decimals."""


@numba.njit(cache=True, nogil=True)
def _put_uint(buf, p, x):
    n = 1
    y = x // 10
    while y > 0:
        y //= 10
        n += 1
    q = p + n
    while True:
        q -= 1
        buf[q] = 48 + x % 10
        x //= 10
        if x == 0:
            break
    return p + n


@numba.njit(cache=True, nogil=True)
def _put_int(buf, p, x):
    if x < 0:
        buf[p] = 45
        return _put_uint(buf, p + 1, -x)
    return _put_uint(buf, p, x)


@numba.njit(cache=True, nogil=True)
def _scaled(ax, power):
    """round-half-even(ax * power) exactly, for 0 <= ax < _LIMIT and power = 10**d <= 10**7."""
    if ax == 0.0:
        return 0
    mant, e = math.frexp(ax)
    m = np.int64(mant * 9007199254740992.0)            # ax = m / 2**s exactly, m < 2**53
    s = 53 - e
    a = (m >> 26) * power                              # m * power = a * 2**26 + b
    b = (m & 67108863) * power
    if s <= 26:
        q = (a << (26 - s)) + (b >> s)
        rem = b & ((1 << s) - 1)
        half = 1 << (s - 1)
        up = rem > half or (rem == half and (q & 1) == 1)
    else:
        t = s - 26
        if t > 52:
            return 0
        a += b >> 26
        b &= 67108863
        q = a >> t
        r = a & ((1 << t) - 1)
        half = 1 << (t - 1)
        up = r > half or (r == half and (b > 0 or (q & 1) == 1))
    return q + 1 if up else q


@numba.njit(cache=True, nogil=True)
def _put_fixed(buf, p, x, d):
    if x != x:
        buf[p], buf[p + 1], buf[p + 2] = 110, 97, 110
        return p + 3
    if math.copysign(1.0, x) < 0:
        buf[p] = 45
        p += 1
    ax = abs(x)
    if ax == math.inf:
        buf[p], buf[p + 1], buf[p + 2] = 105, 110, 102
        return p + 3
    power = np.int64(10) ** d
    n = _scaled(ax, power)
    p = _put_uint(buf, p, n // power)
    if d > 0:
        buf[p] = 46
        frac = n % power
        for k in range(d, 0, -1):
            buf[p + k] = 48 + frac % 10
            frac //= 10
        p += d + 1
    return p


@numba.njit(cache=True, nogil=True)
def _format_block(n, layout, ints, floats, codes, words, word_ends, newline, out):
    p = 0
    for i in range(n):
        for c in range(layout.shape[0]):
            if c:
                out[p] = 44
                p += 1
            kind, col, d = layout[c, 0], layout[c, 1], layout[c, 2]
            if kind == 0:
                p = _put_int(out, p, ints[i, col])
            elif kind == 1:
                p = _put_fixed(out, p, floats[i, col], d)
            else:
                w = codes[i, col]
                lo = word_ends[w - 1] if w else 0
                for k in range(lo, word_ends[w]):
                    out[p] = words[k]
                    p += 1
        for k in range(len(newline)):
            out[p] = newline[k]
            p += 1
    return p


@numba.njit(cache=True, nogil=True)
def _fixed_kernel(x, d, out):
    power = np.int64(10) ** d
    for i in range(len(x)):
        v = x[i]
        n = _scaled(abs(v), power)
        out[i] = math.copysign(n / power, v)      # both exact integers: one correctly rounded division


def fixed_values(values: np.ndarray, decimals: int) -> np.ndarray:
    """The numbers the ``("fixed", values, decimals)`` text reads back as: ``float(format(v, f".{decimals}f"))``
    of every value, computed exactly (the same integer of ``10**-decimals`` the text writes, then
    one correctly rounded division), so another export can hold exactly the CSV's numbers.

    Parameters
    ----------
    values
        Finite numbers.
    decimals
        Decimals written (0 to 7).

    Returns
    -------
    numpy.ndarray
        float64, one per value.
    """
    v = np.asarray(values, dtype=np.float64).ravel()
    if not 0 <= decimals <= _MAX_DECIMALS:
        raise ValueError(f"decimals must be from 0 to {_MAX_DECIMALS}, got {decimals}")
    if not np.all(np.isfinite(v)):
        raise ValueError("fixed-decimal values must be finite, got NaN or infinite values")
    if len(v) and np.abs(v).max() >= 2.0 ** 53 / 10 ** decimals:    # beyond exact integer division
        return np.array([float(format(x, f".{decimals}f")) for x in v.tolist()], dtype=np.float64)
    out = np.empty_like(v)
    _fixed_kernel(v, decimals, out)
    return out


def _check(columns: Sequence[tuple]) -> int:
    lengths = {len(c[1]) for c in columns}
    if len(lengths) != 1:
        raise ValueError(f"table columns must have one length, got lengths {sorted(lengths)}")
    for c in columns:
        if c[0] not in ("int", "fixed", "text") or c[0] == "fixed" and not 0 <= c[2] <= _MAX_DECIMALS:
            raise ValueError(f"table column must be int, fixed (0-{_MAX_DECIMALS} decimals) or text, got {c[:1]}")
        if c[0] == "text" and len(c[1]) and not 0 <= np.min(c[1]) <= np.max(c[1]) < len(c[2]):
            raise ValueError(f"text codes must index the {len(c[2])} words, got codes outside 0..{len(c[2]) - 1}")
    return lengths.pop()


def _kernel_range(columns: Sequence[tuple]) -> bool:
    """Whether every number lies where the kernel formats exactly."""
    for c in columns:
        v = np.asarray(c[1])
        if not len(v):
            continue
        if c[0] == "int" and v.astype(np.int64).min() == np.iinfo(np.int64).min:
            return False
        if c[0] == "fixed":
            finite = np.abs(v[np.isfinite(v)].astype(np.float64))
            if len(finite) and finite.max() >= _LIMIT[c[2]]:
                return False
    return True


def _python_rows(columns: Sequence[tuple], newline: str) -> bytes:
    """The same text written value by value by Python (numbers beyond the kernel's range)."""
    cells = []
    for c in columns:
        if c[0] == "int":
            cells.append([str(v) for v in np.asarray(c[1]).astype(np.int64).tolist()])
        elif c[0] == "fixed":
            cells.append([format(v, f".{c[2]}f") for v in np.asarray(c[1], np.float64).tolist()])
        else:
            cells.append([c[2][k] for k in np.asarray(c[1]).tolist()])
    return "".join(",".join(row) + newline for row in zip(*cells)).encode("utf-8")


def _stack(arrays: list[np.ndarray], n: int, dtype) -> np.ndarray:
    return np.stack(arrays, axis=1).astype(dtype, copy=False) if arrays else np.zeros((n, 0), dtype)


def format_rows(columns: Sequence[tuple], newline: str = "\n") -> bytes:
    """CSV text (UTF-8 bytes) of the rows of ``columns`` (see the module docstring)."""
    n = _check(columns)
    if not _kernel_range(columns):
        return _python_rows(columns, newline)
    by_kind: dict[str, list] = {"int": [], "fixed": [], "text": []}
    layout, words = [], []
    for c in columns:
        kind = c[0]
        layout.append(({"int": _INT, "fixed": _FIXED, "text": _TEXT}[kind], len(by_kind[kind]),
                       c[2] if kind == "fixed" else 0))
        if kind == "text":
            by_kind[kind].append(np.asarray(c[1]).astype(np.int64) + len(words))
            words += [w.encode("utf-8") for w in c[2]]
        else:
            by_kind[kind].append(np.asarray(c[1]))
    width = 21 * len(by_kind["int"]) + 26 * len(by_kind["fixed"]) + len(columns) + len(newline.encode()) \
        + sum(max((len(w) for w in c[2]), default=0) for c in columns if c[0] == "text")
    out = np.empty(n * width, dtype=np.uint8)
    size = _format_block(n, np.array(layout, np.int64).reshape(-1, 3), _stack(by_kind["int"], n, np.int64),
                         _stack(by_kind["fixed"], n, np.float64), _stack(by_kind["text"], n, np.int64),
                         np.frombuffer(b"".join(words), np.uint8),
                         np.cumsum([len(w) for w in words], dtype=np.int64),
                         np.frombuffer(newline.encode(), np.uint8), out)
    return out[:size].tobytes()


def write_rows(fh: BinaryIO, columns: Sequence[tuple], newline: str = "\n", block_rows: int = BLOCK_ROWS) -> None:
    """Write the rows of ``columns`` to a binary file, formatting ``block_rows`` at a time."""
    n = _check(columns)
    for lo in range(0, n, block_rows):
        fh.write(format_rows([(c[0], c[1][lo:lo + block_rows], *c[2:]) for c in columns], newline))
