"""Threshold detection on filtered blocks: one event per spike per channel group.

An event is a peak of the group envelope (the largest polarity-signed amplitude across
the group's channels, in units of each channel's noise sigma) that is at least the
look-up floor and is the largest sample within +/- the dead time (the earlier sample
wins a tie). The channel holding that largest value is the event's channel. Because
this definition does not depend on the threshold, the events at any threshold above the
floor are exactly the stored events whose amplitude reaches it: counts for a new
threshold are a sorted look-up, never a new pass over the file.

Artefacts: samples where at least a given fraction of all live channels, and more channels
than the largest group holds, exceed a level (in sigma, either sign) mark every event within
a window of them as an artefact.
"""

from __future__ import annotations

import numba
import numpy as np

from rigside.core.events import EventColumns

POLARITY_CODE = {"negative": 0, "positive": 1, "both": 2}


@numba.njit(nogil=True, cache=True, fastmath=True)
def _envelopes(y, inv_sigma, polarity, group_channels, group_offsets, art_level, art_count):
    """One pass over the block: per group and sample, the largest polarity-signed amplitude
    in sigma and the channel holding it; and the running count of artefact samples (enough
    live channels beyond the artefact level, either sign)."""
    n, nc = y.shape
    n_groups = len(group_offsets) - 1
    env = np.empty((n_groups, n), dtype=np.float32)
    arg = np.empty((n_groups, n), dtype=np.int32)
    art_cum = np.zeros(n + 1, dtype=np.int64)
    zr = np.empty(nc, dtype=np.float32)
    sign = np.float32(-1.0) if polarity == 0 else np.float32(1.0)
    for t in range(n):
        row = y[t]
        cnt = 0
        for c in range(nc):
            v = row[c] * inv_sigma[c]
            a = abs(v)
            cnt += 1 if a >= art_level and inv_sigma[c] > 0 else 0
            zr[c] = a if polarity == 2 else v * sign
        art_cum[t + 1] = art_cum[t] + (1 if cnt >= art_count else 0)
        for g in range(n_groups):
            bc = group_channels[group_offsets[g]]
            best = zr[bc]
            for k in range(group_offsets[g] + 1, group_offsets[g + 1]):
                c = group_channels[k]
                if zr[c] > best:
                    best = zr[c]
                    bc = c
            env[g, t] = best
            arg[g, t] = bc
    return env, arg, art_cum


@numba.njit(nogil=True, cache=True)
def _detect_block(y, inv_sigma, polarity, group_channels, group_offsets, floor, dead,
                  lo, hi, art_level, art_count, art_window):
    n, nc = y.shape
    n_groups = len(group_offsets) - 1
    envs, args, art_cum = _envelopes(y, inv_sigma, polarity, group_channels, group_offsets,
                                     art_level, art_count)
    cap = 1024
    out_t = np.empty(cap, dtype=np.int64)
    out_c = np.empty(cap, dtype=np.int32)
    out_g = np.empty(cap, dtype=np.int32)
    out_a = np.empty(cap, dtype=np.float32)
    out_s = np.empty(cap, dtype=np.float32)
    out_art = np.empty(cap, dtype=np.bool_)
    m = 0
    for g in range(n_groups):
        env = envs[g]
        arg = args[g]
        for t in range(lo, hi):
            e = env[t]
            if e < floor:
                continue
            if t > 0 and env[t - 1] >= e:
                continue
            if t + 1 < n and env[t + 1] > e:
                continue
            keep = True
            for j in range(max(0, t - dead), t):
                if env[j] >= e:
                    keep = False
                    break
            if keep:
                for j in range(t + 1, min(n, t + dead + 1)):
                    if env[j] > e:
                        keep = False
                        break
            if not keep:
                continue
            if m == cap:
                cap *= 2
                out_t = _grow(out_t, cap)
                out_c = _grow(out_c, cap)
                out_g = _grow(out_g, cap)
                out_a = _grow(out_a, cap)
                out_s = _grow(out_s, cap)
                out_art = _grow(out_art, cap)
            c = arg[t]
            out_t[m] = t
            out_c[m] = c
            out_g[m] = g
            out_a[m] = y[t, c]
            out_s[m] = e
            w0 = max(0, t - art_window)
            w1 = min(n, t + art_window + 1)
            out_art[m] = art_cum[w1] - art_cum[w0] > 0
            m += 1
    return out_t[:m], out_c[:m], out_g[:m], out_a[:m], out_s[:m], out_art[:m]


@numba.njit(cache=True)
def _grow(a, cap):
    b = np.empty(cap, dtype=a.dtype)
    b[:len(a)] = a
    return b


def detect_block(y: np.ndarray, first_sample: int, lo: int, hi: int, sigma_uv: np.ndarray,
                 groups: list[np.ndarray], polarity: str, floor_sigma: float, dead_samples: int,
                 artefact_sigma: float, artefact_fraction: float, artefact_window: int) -> EventColumns:
    """Find events with peak sample in ``[lo, hi)`` of a filtered block.

    Parameters
    ----------
    y
        Filtered block in microvolts (samples x all channels); it must extend at least
        ``max(dead_samples, artefact_window) + 1`` samples beyond ``[lo, hi)`` wherever the
        recording continues, so that results do not depend on where blocks are cut.
    first_sample
        Recording sample of ``y[0]``.
    lo, hi
        The block's own range (indices into ``y``).
    sigma_uv
        Noise sigma per channel; zero marks a dead channel (never detected, and out of its
        group's envelope and of the artefact rule).
    groups
        Channel index arrays, one per group; a group with no live channel has no events.
    polarity, floor_sigma, dead_samples
        Detection polarity, the lowest amplitude kept (sigma) and the dead time (samples).
    artefact_sigma, artefact_fraction, artefact_window
        Artefact rule: level (sigma), fraction of live channels, half-window (samples).

    Returns
    -------
    EventColumns
        Events found in the block (samples relative to the recording), sorted by group then time
        (the caller re-sorts the whole table by time).
    """
    with np.errstate(divide="ignore"):
        inv = np.where(sigma_uv > 0, 1.0 / np.where(sigma_uv > 0, sigma_uv, 1.0), 0.0).astype(np.float32)
    live = int(np.count_nonzero(inv))
    # a spike can reach every channel of its own group: an artefact must reach more channels
    # than the largest group holds (so recordings with one group have no artefact rule)
    art_count = max(int(np.ceil(artefact_fraction * live)), max(len(g) for g in groups) + 1)
    live_groups = [(gi, g[inv[g] > 0]) for gi, g in enumerate(groups)]
    live_groups = [(gi, g) for gi, g in live_groups if len(g)]
    if not live_groups:
        empty = np.empty(0)
        return EventColumns(empty.astype(np.int64), empty.astype(np.int32), empty.astype(np.int32),
                            empty.astype(np.float32), empty.astype(np.float32), empty.astype(np.bool_))
    group_index = np.array([gi for gi, _ in live_groups], dtype=np.int32)
    gch = np.concatenate([g for _, g in live_groups]).astype(np.int64)
    goff = np.concatenate([[0], np.cumsum([len(g) for _, g in live_groups])]).astype(np.int64)
    t, c, g, a, s, art = _detect_block(np.ascontiguousarray(y, dtype=np.float32), inv,
                                       POLARITY_CODE[polarity], gch, goff, np.float32(floor_sigma),
                                       int(dead_samples), int(lo), int(hi), np.float32(artefact_sigma),
                                       art_count, int(artefact_window))
    return EventColumns(t + first_sample, c, group_index[g], a, s, art)
