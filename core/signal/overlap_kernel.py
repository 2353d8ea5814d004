"""The compiled inner loop of the overlap pass (:mod:`rigside.core.signal.overlaps`) over one filtered block.

For every channel group: the residual (noise sigmas) after each assigned event's template, shifted to
the event's sub-sample peak, is subtracted; its envelope (polarity-signed, the largest over the group's
channels); and the candidate finds: samples within ± the dead time of an assigned event (not on it) where
no event of the group sits, whose envelope passes the channel's threshold and ``min_share`` of that
nearest event's amplitude and is the largest within ± the dead time. For each find the residual window
around it and its snippet (microvolts, one extra sample each side for the alignment) are copied out.
Work and memory go with the events, not the block: only the rows within reach of an assigned event are
filtered into the residual, packed span after span (merged where their reaches touch).
"""

from __future__ import annotations

import numba
import numpy as np

POLARITY_CODES = {"negative": 0, "positive": 1, "both": 2}


@numba.njit(nogil=True, cache=True)
def _spans(pos, tmpl, reach, n_t):
    """Merged block-row spans ``[start, stop)`` within ``reach`` of the assigned events (``pos`` sorted)."""
    starts = np.empty(len(pos), np.int64)
    stops = np.empty(len(pos), np.int64)
    n = 0
    for e in range(len(pos)):
        if tmpl[e] < 0:
            continue
        a, b = max(0, pos[e] - reach), min(n_t, pos[e] + reach + 1)
        if n and a <= stops[n - 1]:
            stops[n - 1] = max(stops[n - 1], b)
        elif a < b:
            starts[n], stops[n] = a, b
            n += 1
    return starts[:n], stops[:n]


@numba.njit(nogil=True, cache=True)
def _rows_of(pos, starts, stops):
    """Row of each event in the packed spans (-1 outside them) and the packed row of each span's start."""
    first = np.zeros(len(starts), np.int64)
    for s in range(1, len(starts)):
        first[s] = first[s - 1] + stops[s - 1] - starts[s - 1]
    at = np.full(len(pos), -1, np.int64)
    s = 0
    for e in range(len(pos)):
        while s < len(starts) and stops[s] <= pos[e]:
            s += 1
        if s < len(starts) and starts[s] <= pos[e]:
            at[e] = first[s] + pos[e] - starts[s]
    return at, first


@numba.njit(nogil=True, cache=True)
def _envelope(resid, polarity):
    """Polarity-signed largest value over the channels of each row, and its column."""
    env = np.full(len(resid), -np.inf, np.float32)
    col = np.zeros(len(resid), np.int64)
    for t in range(len(resid)):
        for c in range(resid.shape[1]):
            v = -resid[t, c] if polarity == 0 else resid[t, c] if polarity == 1 else abs(resid[t, c])
            if v > env[t]:
                env[t], col[t] = v, c
    return env, col


@numba.njit(nogil=True, cache=True)
def _residual(y, channels, sigma, starts, stops, first, pos, at, tmpl, shift, templates, slopes, before):
    """The packed spans of the group's channels in sigmas, each assigned event's shifted template subtracted."""
    n_t, c_n = y.shape[0], len(channels)
    inverse = (1.0 / sigma).astype(np.float32)
    resid = np.empty((first[-1] + stops[-1] - starts[-1] if len(starts) else 0, c_n), np.float32)
    for s in range(len(starts)):
        for t in range(starts[s], stops[s]):
            for c in range(c_n):
                resid[first[s] + t - starts[s], c] = y[t, channels[c]] * inverse[c]
    for e in range(len(pos)):
        k = tmpl[e]
        if k < 0:
            continue
        for i in range(templates.shape[1]):
            t = pos[e] - before + i
            if 0 <= t < n_t:
                for c in range(c_n):
                    resid[at[e] + t - pos[e], c] -= templates[k, i, c] - shift[e] * slopes[k, i, c]
    return resid


@numba.njit(nogil=True, cache=True)
def group_finds(y, lo, start, stop, channels, sigma, thr, pos, tmpl, shift, amp, templates, slopes,
                before, after, dead, polarity, min_share):
    """Candidate finds of one group in one block (see the module docstring).

    ``channels``, ``sigma`` and ``thr`` are the group's usable channels, their noise and thresholds
    (sigma); its events are ``pos`` (block rows, sorted), ``tmpl`` (template row, -1 when in no unit),
    ``shift`` (sub-sample peak) and ``amp`` (sigma). Only the rows a find, its peak test or its window
    may read (near an assigned event) are worked on, packed span after span. Returns per find its block
    row, column, envelope, nearest assigned event (index into the event arrays), residual window
    ``(n, length + 2 dead, C)`` in sigmas and snippet ``(n, length + 2, C)`` in microvolts.
    """
    n_t, c_n, length = y.shape[0], len(channels), before + after
    starts, stops = _spans(pos, tmpl, max(before, after) + 2 * dead + 2, n_t)
    at, first = _rows_of(pos, starts, stops)
    resid = _residual(y, channels, sigma, starts, stops, first, pos, at, tmpl, shift, templates, slopes, before)
    occupied = np.zeros(len(resid), np.bool_)
    best_d = np.full(len(resid), dead + 1, np.int64)
    best_e = np.full(len(resid), -1, np.int64)
    for e in range(len(pos)):
        if at[e] >= 0:
            occupied[at[e]] = True
        if tmpl[e] < 0:
            continue
        for t in range(max(0, pos[e] - dead), min(n_t, pos[e] + dead + 1)):
            k = at[e] + t - pos[e]
            if abs(t - pos[e]) < best_d[k]:
                best_d[k], best_e[k] = abs(t - pos[e]), e
    env, col = _envelope(resid, polarity)
    rows = np.empty(len(resid), np.int64)
    packed = np.empty(len(resid), np.int64)
    n = 0
    for s in range(len(starts)):
        for t in range(max(starts[s], before + dead + 1), min(stops[s], n_t - after - dead - 1)):
            k = first[s] + t - starts[s]
            e = best_e[k]
            if e < 0 or best_d[k] < 1 or occupied[k] or lo + t < start or lo + t >= stop:
                continue
            if env[k] < thr[col[k]] or env[k] < min_share * amp[e]:
                continue
            peak = True
            for u in range(k - dead, k + dead + 1):
                if env[u] > env[k]:
                    peak = False
                    break
            if peak:
                rows[n], packed[n] = t, k
                n += 1
    rows, packed = rows[:n], packed[:n]
    windows = np.empty((n, length + 2 * dead, c_n), np.float32)
    snippets = np.empty((n, length + 2, c_n), np.float32)
    for m in range(n):
        k = packed[m]
        for c in range(c_n):
            for i in range(length + 2 * dead):
                windows[m, i, c] = resid[k - before - dead + i, c]
            for i in range(length + 2):
                snippets[m, i, c] = resid[k - before - 1 + i, c] * sigma[c]
    return rows, col[packed], env[packed], best_e[packed], windows, snippets
