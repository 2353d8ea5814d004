"""First pass on a probe shank by overlapping regions along the probe.

A shank holds many more units than one mixture should model, and a unit's spikes reach several
sites. Its events are therefore clustered region by region: the shank is cut along ``y_um`` (the
events' position estimate, a feature column) into *cores* ``region_um / 2`` long, and each region
is a core with a quarter of ``region_um`` added on each side, so neighbouring regions overlap by
half and every event lies in at most two. Each region is clustered on its own (the group
clustering of :mod:`rigside.core.units.clustering`: mixture, merging, fragments, split test).

Then every cluster is kept once (our own rule, no source):

1. A cluster belongs to the region whose core holds the median position of its events; clusters of
   other regions are dropped (a unit sitting near an edge is whole in one region and cut in the
   other, and its cut copy has its median outside its region's core).
2. Two kept clusters of neighbouring regions sharing at least half of the smaller one's events are
   one unit seen twice (their medians fell on the two sides of a core boundary): they are joined.
3. An event claimed by two kept clusters goes to the one whose median position is nearer to its
   own; an event claimed by none goes to the kept cluster holding most of the events of its cluster
   in its own core's region (when that cluster is dropped), or stays unassigned.
4. A kept cluster left with fewer than ``min_unit_events`` events is a fragment: its events are
   unassigned (the share rule of :mod:`rigside.core.units.refine` applies within each region, to the
   region's events: a shank-wide share would drop the sparse units of a long probe).

A unit whose spikes peak on two adjacent sites thus stays one unit as long as both sites lie in one
region, which the overlap guarantees for units narrower than a quarter of ``region_um``.
"""

from __future__ import annotations

import numpy as np

from rigside.core.params import ClusterParams


def region_cores(y_um: np.ndarray, region_um: float) -> np.ndarray:
    """Boundaries of the cores (``k + 1`` values for ``k`` cores, ``region_um / 2`` apart from the
    lowest position); one core when every position lies within ``region_um``."""
    y = np.asarray(y_um, dtype=np.float64)
    if not len(y) or float(y.max() - y.min()) <= region_um:
        return np.array([-np.inf, np.inf])
    step = region_um / 2
    k = int(np.floor((y.max() - y.min()) / step)) + 1
    edges = y.min() + step * np.arange(k + 1)
    edges[0], edges[-1] = -np.inf, np.inf
    return edges


def region_rows(y_um: np.ndarray, edges: np.ndarray, region_um: float) -> list[np.ndarray]:
    """Rows of every region: its core widened by a quarter of ``region_um`` each side."""
    y = np.asarray(y_um, dtype=np.float64)
    pad = region_um / 4
    return [np.flatnonzero((y >= lo - pad) & (y < hi + pad)) for lo, hi in zip(edges[:-1], edges[1:])]


def join_regions(y_um: np.ndarray, rows: list[np.ndarray], labels: list[np.ndarray], edges: np.ndarray,
                 params: ClusterParams) -> np.ndarray:
    """One label per event (0..m-1, -1 unassigned) from the regions' clusterings (module text).

    Parameters
    ----------
    y_um
        Position of every clustered event of the shank.
    rows, labels
        Per region, its event rows and their cluster labels (-1: unassigned in that region).
    edges
        Core boundaries (:func:`region_cores`).
    params
        The smallest unit size (``min_unit_events``).
    """
    y = np.asarray(y_um, dtype=np.float64)
    n = len(y)
    core = np.clip(np.searchsorted(edges, y, side="right") - 1, 0, len(edges) - 2)
    # every region's clusters as global ids; kept where the median lies in the region's core
    ids, kept, medians, first = [], [], [], 0
    for k, (r, lab) in enumerate(zip(rows, labels)):
        m = int(lab.max()) + 1 if len(lab) and lab.max() >= 0 else 0
        med = np.array([np.median(y[r[lab == c]]) for c in range(m)]) if m else np.zeros(0)
        kept.append((med >= edges[k]) & (med < edges[k + 1]))
        medians.append(med)
        ids.append(np.where(lab >= 0, lab + first, -1))
        first += m
    keep = np.concatenate(kept) if kept else np.zeros(0, bool)
    median = np.concatenate(medians) if medians else np.zeros(0)
    owner = _joined(rows, ids, keep, first)
    # the (at most two) claims of every event: its core region's cluster and the other region's
    claim = np.full((n, 2), -1, dtype=np.int64)
    for k, (r, i) in enumerate(zip(rows, ids)):
        claim[r, (core[r] != k).astype(np.int64)] = i
    kept_claim = np.where((claim >= 0) & keep[np.maximum(claim, 0)], owner[np.maximum(claim, 0)], -1)
    both = (kept_claim >= 0).all(axis=1)
    dist = np.abs(median[np.maximum(kept_claim, 0)] - y[:, None])
    out = np.where(both, kept_claim[np.arange(n), dist.argmin(axis=1)], kept_claim.max(axis=1))
    out = _inherit(out, claim[:, 0], keep, first)
    sizes = np.bincount(out[out >= 0], minlength=first)
    out[(out >= 0) & (sizes[np.maximum(out, 0)] < params.min_unit_events)] = -1
    used = out >= 0
    dense = np.full(n, -1, dtype=np.int32)
    dense[used] = np.unique(out[used], return_inverse=True)[1].ravel()
    return dense


def _joined(rows: list[np.ndarray], ids: list[np.ndarray], keep: np.ndarray, count: int) -> np.ndarray:
    """The cluster each kept cluster stands for after joining kept clusters of neighbouring regions
    that share at least half of the smaller one's events (rule 2); dropped clusters map to themselves."""
    owner = np.arange(count)

    def root(c: int) -> int:
        while owner[c] != c:
            c = owner[c]
        return c

    for k in range(len(rows) - 1):
        common, ia, ib = np.intersect1d(rows[k], rows[k + 1], return_indices=True)
        if not len(common):
            continue
        a, b = ids[k][ia], ids[k + 1][ib]
        both = (a >= 0) & (b >= 0) & keep[np.maximum(a, 0)] & keep[np.maximum(b, 0)]
        pairs, shared = np.unique(np.stack([a[both], b[both]]), axis=1, return_counts=True)
        size_a = np.bincount(ids[k][ids[k] >= 0], minlength=count)
        size_b = np.bincount(ids[k + 1][ids[k + 1] >= 0], minlength=count)
        for (ca, cb), s in zip(pairs.T, shared):
            if s >= 0.5 * min(size_a[ca], size_b[cb]):
                owner[root(int(cb))] = root(int(ca))
    return np.array([root(c) for c in range(count)], dtype=np.int64)


def _inherit(out: np.ndarray, own_claim: np.ndarray, keep: np.ndarray, count: int) -> np.ndarray:
    """Events claimed by no kept cluster follow their own-core cluster (dropped) to the kept cluster
    that received most of its other events (rule 3), else stay unassigned."""
    lost = (out < 0) & (own_claim >= 0)
    if not lost.any():
        return out
    placed = (out >= 0) & (own_claim >= 0) & ~keep[np.maximum(own_claim, 0)]
    target = np.full(count, -1, dtype=np.int64)
    if placed.any():
        pairs, n = np.unique(np.stack([own_claim[placed], out[placed]]), axis=1, return_counts=True)
        order = np.lexsort((-n, pairs[0]))
        first = np.r_[True, np.diff(pairs[0][order]) != 0]
        target[pairs[0][order][first]] = pairs[1][order][first]
    out = out.copy()
    out[lost] = target[own_claim[lost]]
    return out
