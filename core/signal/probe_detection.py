"""Detection on a probe: one event per spike as a spatio-temporal peak over overlapping neighbourhoods.

An event is a sample ``(t, c)`` whose polarity-signed amplitude in sigma, ``z[t, c]``, is at least
the look-up floor and is the largest over the neighbourhood of ``c`` (see
:mod:`rigside.core.signal.neighbourhoods`) and over ``t`` +/- the dead time (at least one sample).
Ties go to the earlier sample, then to the lower channel, so exactly one sample of a plateau wins.
As on bundles, this definition does not depend on the threshold: the events at any threshold above
the floor are exactly the stored ones whose amplitude reaches it (the sorted look-up keeps working).

Position: each event's ``x_um``, ``y_um`` is the centre of mass of its neighbourhood's sites weighted
by each site's peak polarity-signed amplitude in microvolts within +/- :data:`POSITION_WINDOW_MS` of
the event (negative weights count as 0, dead sites are left out). Caution: the centre of mass is
biased toward the peak site (the neighbourhood is centred on it and cuts off the far side of the
footprint), the more so the slower the amplitude decays with distance; it is no source localisation.

Artefacts: as on bundles (:mod:`rigside.core.signal.detection`), but the count of sites beyond the
artefact level must exceed the largest neighbourhood, since one spike can reach a whole neighbourhood.
"""

from __future__ import annotations

import numba
import numpy as np

from rigside.core.signal.detection import POLARITY_CODE, BlockEvents, _grow
from rigside.core.signal.neighbourhoods import Neighbourhoods

POSITION_WINDOW_MS = 0.2
"""Half-window (ms) around an event in which each site's peak amplitude is taken for the position."""


@numba.njit(nogil=True, cache=True, fastmath=True)
def _row_counts(y, inv_sigma, polarity, floor, art_level, art_count):
    """One vectorised pass over the block: per sample, the number of sites at or above the floor
    (rows without any are never searched), and the running count of artefact samples (enough
    live sites beyond the artefact level, either sign)."""
    n, nc = y.shape
    above = np.empty(n, dtype=np.int32)
    art_cum = np.zeros(n + 1, dtype=np.int64)
    sign = np.float32(-1.0) if polarity == 0 else np.float32(1.0)
    for t in range(n):
        row = y[t]
        cnt = 0
        k = 0
        for c in range(nc):
            v = row[c] * inv_sigma[c]
            a = abs(v)
            cnt += 1 if a >= art_level and inv_sigma[c] > 0 else 0
            k += 1 if (a if polarity == 2 else v * sign) >= floor else 0
        above[t] = k
        art_cum[t + 1] = art_cum[t] + (1 if cnt >= art_count else 0)
    return above, art_cum


@numba.njit(nogil=True, cache=True, inline="always")
def _z(y, inv_sigma, polarity, t, c):
    """Polarity-signed amplitude in sigma of one sample (computed where needed, never stored)."""
    v = y[t, c] * inv_sigma[c]
    if polarity == 2:
        return abs(v)
    return -v if polarity == 0 else v


@numba.njit(nogil=True, cache=True)
def _is_peak(y, inv_sigma, polarity, t, c, e, w, nb_off, nb_mem):
    """Whether ``z[t, c] = e`` beats every sample of its neighbourhood within +/- ``w`` (ties: earlier
    sample, then lower channel). The own channel is checked first, then the neighbours, each from
    the nearest samples outward: a larger sample, if there is one, is almost always close by."""
    n = y.shape[0]
    for k in range(1, w + 1):
        if t - k >= 0 and _z(y, inv_sigma, polarity, t - k, c) >= e:
            return False
        if t + k < n and _z(y, inv_sigma, polarity, t + k, c) > e:
            return False
    for k in range(0, w + 1):
        for i in range(nb_off[c], nb_off[c + 1]):
            d = nb_mem[i]
            if d == c:
                continue
            if t - k >= 0:
                v = _z(y, inv_sigma, polarity, t - k, d)
                if v > e or (v == e and (k > 0 or d < c)):
                    return False
            if k > 0 and t + k < n and _z(y, inv_sigma, polarity, t + k, d) > e:
                return False
    return True


@numba.njit(nogil=True, cache=True)
def _centre(y, inv_sigma, polarity, t, c, half, nb_off, nb_mem, xs, ys):
    """Amplitude-weighted centre of mass of the neighbourhood of ``c`` around sample ``t``."""
    n = y.shape[0]
    sign = np.float32(-1.0) if polarity == 0 else np.float32(1.0)
    sw = 0.0
    sx = 0.0
    sy = 0.0
    for k in range(nb_off[c], nb_off[c + 1]):
        d = nb_mem[k]
        if inv_sigma[d] <= 0:
            continue
        best = 0.0
        for j in range(max(0, t - half), min(n, t + half + 1)):
            v = abs(y[j, d]) if polarity == 2 else y[j, d] * sign
            if v > best:
                best = v
        sw += best
        sx += best * xs[d]
        sy += best * ys[d]
    if sw <= 0:
        return xs[c], ys[c]
    return sx / sw, sy / sw


@numba.njit(nogil=True, cache=True)
def _probe_block(y, inv_sigma, polarity, nb_off, nb_mem, xs, ys, floor, dead, lo, hi,
                 art_level, art_count, art_window, half):
    n, nc = y.shape
    above, art_cum = _row_counts(y, inv_sigma, polarity, floor, art_level, art_count)
    w = max(dead, 1)
    cap = 1024
    out_t = np.empty(cap, dtype=np.int64)
    out_c = np.empty(cap, dtype=np.int32)
    out_a = np.empty(cap, dtype=np.float32)
    out_s = np.empty(cap, dtype=np.float32)
    out_art = np.empty(cap, dtype=np.bool_)
    out_x = np.empty(cap, dtype=np.float32)
    out_y = np.empty(cap, dtype=np.float32)
    m = 0
    for t in range(lo, hi):
        if above[t] == 0:
            continue
        for c in range(nc):
            e = _z(y, inv_sigma, polarity, t, c)
            if e < floor or not _is_peak(y, inv_sigma, polarity, t, c, e, w, nb_off, nb_mem):
                continue
            if m == cap:
                cap *= 2
                out_t = _grow(out_t, cap)
                out_c = _grow(out_c, cap)
                out_a = _grow(out_a, cap)
                out_s = _grow(out_s, cap)
                out_art = _grow(out_art, cap)
                out_x = _grow(out_x, cap)
                out_y = _grow(out_y, cap)
            out_t[m] = t
            out_c[m] = c
            out_a[m] = y[t, c]
            out_s[m] = e
            w0 = max(0, t - art_window)
            w1 = min(n, t + art_window + 1)
            out_art[m] = art_cum[w1] - art_cum[w0] > 0
            out_x[m], out_y[m] = _centre(y, inv_sigma, polarity, t, c, half, nb_off, nb_mem, xs, ys)
            m += 1
    return out_t[:m], out_c[:m], out_a[:m], out_s[:m], out_art[:m], out_x[:m], out_y[:m]


def detect_probe_block(y: np.ndarray, first_sample: int, lo: int, hi: int, sigma_uv: np.ndarray,
                       neighbourhoods: Neighbourhoods, positions: np.ndarray, channel_group: np.ndarray,
                       polarity: str, floor_sigma: float, dead_samples: int, artefact_sigma: float,
                       artefact_fraction: float, artefact_window: int, position_half: int) -> BlockEvents:
    """Find the spatio-temporal peaks with peak sample in ``[lo, hi)`` of a filtered block.

    Parameters
    ----------
    y
        Filtered block in microvolts (samples x all channels); it must extend at least
        ``max(dead_samples, artefact_window, position_half) + 1`` samples beyond ``[lo, hi)``
        wherever the recording continues, so that results do not depend on where blocks are cut.
    first_sample
        Recording sample of ``y[0]``.
    lo, hi
        The block's own range (indices into ``y``).
    sigma_uv
        Noise sigma per channel; zero marks a dead channel (never an event, no weight in positions,
        out of the artefact rule).
    neighbourhoods
        Every site's neighbours (:func:`rigside.core.signal.neighbourhoods.neighbourhoods`).
    positions
        ``(channels, 2)`` site x and y in micrometres.
    channel_group
        Group of each channel (the event's ``group`` is its peak channel's).
    polarity, floor_sigma, dead_samples
        Detection polarity, the lowest amplitude kept (sigma) and the dead time (samples).
    artefact_sigma, artefact_fraction, artefact_window
        Artefact rule: level (sigma), fraction of live channels, half-window (samples).
    position_half
        Half-window (samples) for each site's peak amplitude in the position estimate.

    Returns
    -------
    BlockEvents
        Events sorted by time then channel, with ``x_um`` and ``y_um``.
    """
    with np.errstate(divide="ignore"):
        inv = np.where(sigma_uv > 0, 1.0 / np.where(sigma_uv > 0, sigma_uv, 1.0), 0.0).astype(np.float32)
    live = int(np.count_nonzero(inv))
    art_count = max(int(np.ceil(artefact_fraction * live)), int(neighbourhoods.sizes.max()) + 1)
    xs = np.ascontiguousarray(positions[:, 0], dtype=np.float64)
    ys = np.ascontiguousarray(positions[:, 1], dtype=np.float64)
    t, c, a, s, art, x, yy = _probe_block(np.ascontiguousarray(y, dtype=np.float32), inv, POLARITY_CODE[polarity],
                                          neighbourhoods.offsets, neighbourhoods.members, xs, ys,
                                          np.float32(floor_sigma), int(dead_samples), int(lo), int(hi),
                                          np.float32(artefact_sigma), art_count, int(artefact_window),
                                          int(position_half))
    group = np.asarray(channel_group, dtype=np.int32)[c]
    return BlockEvents(t + first_sample, c, group, a, s, art, x, yy)
