"""The compiled inner loop of the overlap pass (:mod:`rigside.core.signal.overlaps`) over one filtered block.

For every channel group: the residual (noise sigmas) after each assigned event's template, shifted to
the event's sub-sample peak, is subtracted; its envelope (polarity-signed, the largest over the group's
channels); and the candidate finds: samples within ± the dead time of an assigned event (not on it) where
no event of the group sits, whose envelope passes the channel's threshold and ``min_share`` of that
nearest event's amplitude and is the largest within ± the dead time. For each find the residual window
around it and its snippet (microvolts, one extra sample each side for the alignment) are copied out.
"""

from __future__ import annotations

import numba
import numpy as np

POLARITY_CODES = {"negative": 0, "positive": 1, "both": 2}


@numba.njit(nogil=True, cache=True)
def _envelope(resid, needed, polarity):
    """Polarity-signed largest value over the channels of each needed row, and its column."""
    env = np.full(len(resid), -np.inf, np.float32)
    col = np.zeros(len(resid), np.int64)
    for t in range(len(resid)):
        if needed[t]:
            for c in range(resid.shape[1]):
                v = -resid[t, c] if polarity == 0 else resid[t, c] if polarity == 1 else abs(resid[t, c])
                if v > env[t]:
                    env[t], col[t] = v, c
    return env, col


@numba.njit(nogil=True, cache=True)
def group_finds(y, lo, start, stop, channels, sigma, thr, pos, tmpl, shift, amp, templates, slopes,
                before, after, dead, polarity, min_share):
    """Candidate finds of one group in one block (see the module docstring).

    ``channels``, ``sigma`` and ``thr`` are the group's usable channels, their noise and thresholds
    (sigma); its events are ``pos`` (block rows, sorted), ``tmpl`` (template row, -1 when in no unit),
    ``shift`` (sub-sample peak) and ``amp`` (sigma). Returns per find its block row, column, envelope,
    nearest assigned event (index into the event arrays), residual window ``(n, length + 2 dead, C)`` in
    sigmas and snippet ``(n, length + 2, C)`` in microvolts.
    """
    n_t, c_n, length = y.shape[0], len(channels), before + after
    needed = np.zeros(n_t, np.bool_)          # rows a find, its peak test or its window may read
    reach = max(before, after) + 2 * dead + 2
    for e in range(len(pos)):
        if tmpl[e] >= 0:
            needed[max(0, pos[e] - reach):min(n_t, pos[e] + reach + 1)] = True
    inverse = (1.0 / sigma).astype(np.float32)
    resid = np.zeros((n_t, c_n), np.float32)
    for t in range(n_t):
        if needed[t]:
            for c in range(c_n):
                resid[t, c] = y[t, channels[c]] * inverse[c]
    occupied = np.zeros(n_t, np.bool_)
    best_d = np.full(n_t, dead + 1, np.int64)
    best_e = np.full(n_t, -1, np.int64)
    for e in range(len(pos)):
        p = pos[e]
        if 0 <= p < n_t:
            occupied[p] = True
        k = tmpl[e]
        if k < 0:
            continue
        for i in range(length):
            t = p - before + i
            if 0 <= t < n_t:
                for c in range(c_n):
                    resid[t, c] -= templates[k, i, c] - shift[e] * slopes[k, i, c]
        for t in range(max(0, p - dead), min(n_t, p + dead + 1)):
            if abs(t - p) < best_d[t]:
                best_d[t], best_e[t] = abs(t - p), e
    env, col = _envelope(resid, needed, polarity)
    rows = np.empty(n_t, np.int64)
    n = 0
    for t in range(before + dead + 1, n_t - after - dead - 1):
        e = best_e[t]
        if e < 0 or best_d[t] < 1 or not needed[t] or occupied[t] or lo + t < start or lo + t >= stop:
            continue
        if env[t] < thr[col[t]] or env[t] < min_share * amp[e]:
            continue
        peak = True
        for u in range(t - dead, t + dead + 1):
            if env[u] > env[t]:
                peak = False
                break
        if peak:
            rows[n] = t
            n += 1
    rows = rows[:n]
    windows = np.empty((n, length + 2 * dead, c_n), np.float32)
    snippets = np.empty((n, length + 2, c_n), np.float32)
    for m in range(n):
        t = rows[m]
        for c in range(c_n):
            for i in range(length + 2 * dead):
                windows[m, i, c] = resid[t - before - dead + i, c]
            for i in range(length + 2):
                snippets[m, i, c] = resid[t - before - 1 + i, c] * sigma[c]
    return rows, col[rows], env[rows], best_e[rows], windows, snippets
