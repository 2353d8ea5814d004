"""First-pass clustering of event features, one channel group at a time.

Each group's features are standardised (z-scores from a fitted subsample) and modelled by a
Gaussian mixture with full covariances (:mod:`rigside.core.units.em`: scikit-learn's
``GaussianMixture`` algorithm, compiled). The number of
components is the one with the lowest Bayesian information criterion (Schwarz 1978) over
``k_min..k_max``, searched upwards and stopped after ``patience`` successive values of k that
do not improve it; ``k`` may also be forced. The mixture is fitted on a random subsample of at
most ``fit_events`` events and then assigns every event of the group, so the cost per group is
bounded whatever the recording length. All randomness comes from ``seed`` and the group
number, so a run is reproducible.

A mixture chosen by BIC often spends several Gaussian components on one non-Gaussian cluster
(bursts, drift, heavy tails). Components are therefore merged hierarchically by directly
estimated misclassification probabilities (DEMP; Hennig 2010, Adv. Data Anal. Classif.
4:3-34) [memory]: for two clusters A and B of components, p(A->B) is the posterior weight of A
on the fitted events that the current clusters classify as B, divided by A's total posterior
weight; the pair with the largest max(p(A->B), p(B->A)) is merged while that value exceeds
``merge_overlap``. Every event then goes to the cluster with the largest summed posterior.

Artefact events are not clustered: they get the unit id :data:`NO_UNIT` (-1), meaning "in no
unit". Unit ids are positive, unique across groups, and numbered group by group; inside a
group, clusters are numbered by decreasing mean peak magnitude.
"""

from __future__ import annotations

from collections.abc import Iterator
from concurrent.futures import ProcessPoolExecutor
from multiprocessing import get_all_start_methods, get_context

import numpy as np

from rigside.core.errors import RigsideError
from rigside.core.params import ClusterParams
from rigside.core.progress import CancelFn, ProgressFn, check, report, run_bounded
from rigside.core.signal.chunk_pool import single_threaded_pools
from rigside.core.units.em import Mixture, warm_up
from rigside.core.units.mixture import fit_mixture, merge_components
from rigside.core.units.refine import (
    OUTLIER_PART,
    TwoPartTest,
    absorb_fragments,
    smallest_unit,
    split_clusters,
    trimmed_two_part_test,
    two_part_test,
)
from rigside.core.units.regions import join_regions, region_cores, region_rows
from rigside.core.units.sorting import NO_UNIT

MIN_EVENTS_PER_COMPONENT = 10
"""A fit never uses more components than one per this many fitted events."""

WORKER_START = "fork" if "fork" in get_all_start_methods() else "spawn"
"""How worker processes start: forked where the system can (a few ms; a fresh interpreter
importing scikit-learn took 1.5-10 s here), so the caller must hold no lock in another thread
(the command-line sort runs it from its only thread)."""

REGION_STREAMS = 1 << 16
"""Seed streams of a probe group's regions: ``group * REGION_STREAMS + region``."""

ASSIGN_BLOCK = 1 << 16
"""Events assigned to the fitted mixture at a time (bounds the memory of the assignment)."""

def _scaling(x: np.ndarray, fit_rows: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Mean, sd and kept columns of the fit rows (constant columns are dropped)."""
    ref = x[fit_rows].astype(np.float64)
    mean = ref.mean(axis=0)
    sd = ref.std(axis=0)
    keep = sd > 1e-12 * np.maximum(1.0, np.abs(mean))
    return mean[keep], sd[keep], keep


def _z(x: np.ndarray, scaling: tuple[np.ndarray, np.ndarray, np.ndarray]) -> np.ndarray:
    mean, sd, keep = scaling
    return ((x[:, keep] - mean) / sd).astype(np.float64)


def cluster_features(features: np.ndarray, params: ClusterParams, stream: int = 0,
                     k: int | None = None) -> np.ndarray:
    """Cluster one set of events (one channel group, or one unit being split).

    Parameters
    ----------
    features
        Feature matrix, events x features, finite values.
    params
        Clustering settings; ``k`` (argument) overrides ``params.k``.
    stream
        Extra seed component (the group number), so groups draw independent subsamples.
    k
        Forced cluster count, or ``None`` to use ``params.k`` or the BIC search followed by
        the merging of overlapping components (a forced count is kept as asked).

    Returns
    -------
    np.ndarray
        Cluster index per event (int32, 0..n_clusters-1, every index used), numbered in the
        order of the fitted mixture's (merged) components after empty ones are removed.

    Notes
    -----
    The matrices are small, so linear algebra (BLAS) and the k-means initialisation (OpenMP)
    run on one thread: on a shared 2-core machine, threaded pools made the first pass of
    10^6 events about three times slower (measured here). One thread also makes the result
    independent of the machine's thread count, which journal replay relies on. The limit is
    process-wide (:func:`single_threaded_pools`): while a clustering runs, BLAS calls of every
    other thread are single-threaded too.
    """
    with single_threaded_pools():
        return _cluster(features, params, stream, k)


def _cluster(features: np.ndarray, params: ClusterParams, stream: int, k: int | None,
             channel: np.ndarray | None = None, refine: bool = False, time_s: np.ndarray | None = None) -> np.ndarray:
    x = np.asarray(features)
    n = len(x)
    if n == 0:
        return np.zeros(0, dtype=np.int32)
    if x.ndim != 2:
        raise RigsideError(f"feature matrix must be 2-D (events x features), got shape {x.shape}")
    if not np.isfinite(x).all():
        bad = int((~np.isfinite(x)).any(axis=1).sum())
        raise RigsideError(f"features must be finite to be clustered, got {bad} events with NaN or Inf")
    rng = np.random.default_rng([params.seed, stream])
    fit_rows = np.sort(rng.choice(n, params.fit_events, replace=False)) if n > params.fit_events \
        else np.arange(n)
    scaling = _scaling(x, fit_rows)
    forced = k if k is not None else params.k
    if not scaling[2].any():
        return (np.full(n, -1, dtype=np.int32) if refine and n < smallest_unit(params, n)
                else np.zeros(n, dtype=np.int32))
    random_state = int(rng.integers(0, 2**31 - 1))
    zf = _z(x[fit_rows], scaling)
    best = _search(zf, params, random_state, forced)
    merged = merge_components(best.predict_proba(zf), params.merge_overlap) if forced is None \
        else [[c] for c in range(best.n_components)]
    labels = _assign(x, scaling, best, merged)
    if refine and forced is None:
        z = _z(x, scaling)
        labels = absorb_fragments(z, labels, best, merged, params)
        if params.split_test:
            labels = split_clusters(z, labels, channel, params, rng, time_s)
    used = labels >= 0
    dense = np.full(n, -1, dtype=np.int32)
    dense[used] = np.unique(labels[used], return_inverse=True)[1].ravel()
    return dense


def unit_two_parts(features: np.ndarray, channel: np.ndarray | None, params: ClusterParams,
                   stream: int = 0) -> TwoPartTest | None:
    """The first pass's split test (:func:`rigside.core.units.refine.two_part_test`) on one unit's events.

    The features are standardised as a group's are (z-scores of a seeded subsample); the
    subsample and the fits' random state come from ``params.seed`` and ``stream`` (the unit id),
    so the same unit gives the same parts every time. When the smaller part holds less than
    :data:`~rigside.core.units.refine.OUTLIER_PART` of the events (a few far events rather than a
    second unit), the test is run again without the outlying events
    (:func:`~rigside.core.units.refine.trimmed_two_part_test`), and that result is kept when two
    parts win it and the smaller holds at least that share. None when the events are fewer than
    two or their features constant.
    """
    x = np.asarray(features)
    n = len(x)
    if n < 2:
        return None
    rng = np.random.default_rng([params.seed, stream])
    fit_rows = np.sort(rng.choice(n, params.fit_events, replace=False)) if n > params.fit_events \
        else np.arange(n)
    scaling = _scaling(x, fit_rows)
    if not scaling[2].any():
        return None
    z = _z(x, scaling)
    with single_threaded_pools():
        test = two_part_test(z, channel, params, rng)
        if test.smaller_part >= OUTLIER_PART:
            return test
        retry = trimmed_two_part_test(z, channel, params, rng)
    return retry if retry is not None and retry.delta_bic_per_event > 0 and retry.smaller_part >= OUTLIER_PART \
        else test


def _search(zf: np.ndarray, params: ClusterParams, random_state: int, forced: int | None) -> Mixture:
    """The mixture of ``forced`` components, or of the count of lowest BIC (searched upwards)."""
    if forced is not None:
        return fit_mixture(zf, min(int(forced), len(zf)), params, random_state)
    k_cap = max(1, len(zf) // MIN_EVENTS_PER_COMPONENT)
    best, best_bic, worse = None, np.inf, 0
    for kk in range(params.k_min, min(params.k_max, k_cap) + 1):
        gm = fit_mixture(zf, kk, params, random_state)
        bic = gm.bic(zf)
        if bic < best_bic:
            best, best_bic, worse = gm, bic, 0
        else:
            worse += 1
            if worse >= params.patience:
                break
    return best if best is not None else fit_mixture(zf, 1, params, random_state)


def _assign(x: np.ndarray, scaling, mixture: Mixture, merged: list[list[int]]) -> np.ndarray:
    """Cluster of largest summed posterior for every event, in blocks of :data:`ASSIGN_BLOCK`.

    Memory stays bounded whatever the event count; the blocks are fixed, so the result does
    not depend on how the work is spread.
    """
    labels = np.empty(len(x), dtype=np.int64)
    for b0 in range(0, len(x), ASSIGN_BLOCK):
        tau = mixture.predict_proba(_z(x[b0:b0 + ASSIGN_BLOCK], scaling))
        labels[b0:b0 + ASSIGN_BLOCK] = np.column_stack([tau[:, c].sum(axis=1) for c in merged]).argmax(axis=1)
    return labels


def _cluster_group(key: tuple[int, int], features: np.ndarray, channel: np.ndarray | None, params: ClusterParams,
                   stream: int, time_s: np.ndarray | None = None) -> tuple[tuple[int, int], np.ndarray]:
    """One group's (or probe region's) labels (-1: unassigned), tagged with its key (runs in worker processes)."""
    with single_threaded_pools():
        return key, _cluster(features, params, stream, None, channel, refine=True, time_s=time_s)


def _checked_rows(group: np.ndarray, artefact: np.ndarray, features: np.ndarray, amplitude_uv: np.ndarray,
                  channel: np.ndarray | None, time_s: np.ndarray | None) -> int:
    """The event count, once every column has one row per event (:class:`RigsideError` otherwise)."""
    n = len(group)
    lengths = {len(features), len(artefact), len(amplitude_uv)} | {len(c) for c in (channel, time_s) if c is not None}
    if features.ndim != 2 or lengths != {n}:
        raise RigsideError(f"features and event columns must have one row per event ({n}), got features "
                           f"{features.shape}, artefact {len(artefact)}, amplitude {len(amplitude_uv)}")
    return n


def _group_rows(group: np.ndarray, artefact: np.ndarray, todo: list[int]) -> list[np.ndarray]:
    """The rows of each group in ``todo`` that are not artefacts."""
    order = np.argsort(group, kind="stable")
    bounds = np.searchsorted(group[order], [todo, np.add(todo, 1)]) if todo else np.zeros((2, 0), int)
    return [r[~artefact[r]] for r in (order[bounds[0, i]:bounds[1, i]] for i in range(len(todo)))]


def _tasks(busy: list[int], cut: dict, rows_of: list[np.ndarray], todo: list[int], features: np.ndarray,
           channel: np.ndarray | None, time_s: np.ndarray | None, params: ClusterParams) -> Iterator[tuple]:
    """The :func:`_cluster_group` arguments of every region of every busy group, each cut out only when
    it is taken (the pool holds a few at a time, not a copy of every event's features); a group of one
    region draws the group's own seed stream, the regions of a probe group ``group * REGION_STREAMS + k``."""
    def pick(col, rows):
        return None if col is None else np.asarray(col)[rows]
    return (((i, k), features[rows_of[i][r]], pick(channel, rows_of[i][r]), params,
             todo[i] if cut[i][1] is None else todo[i] * REGION_STREAMS + k, pick(time_s, rows_of[i][r]))
            for i in busy for k, r in enumerate(cut[i][0]))


def _run_tasks(tasks: Iterator[tuple], n_tasks: int, workers: int, on_result, cancel: CancelFn) -> None:
    """Cluster the ``n_tasks`` tasks (:func:`_cluster_group` arguments) in worker processes, results in order."""
    if workers > 1 and n_tasks > 1:
        processes = ProcessPoolExecutor(min(workers, n_tasks), mp_context=get_context(WORKER_START))
        run_bounded(_cluster_group, tasks, workers, on_result, cancel, pool=processes)
    else:
        for task in tasks:
            check(cancel)
            on_result(_cluster_group(*task))


def _regions(rows: np.ndarray, features: np.ndarray, y_column: int | None, region_um: float):
    """A group's regions: its rows in one region without positions, else cut along the probe
    (:mod:`rigside.core.units.regions`); with the core boundaries (None for one region)."""
    if y_column is None:
        return [np.arange(len(rows))], None
    y = features[rows, y_column]
    edges = region_cores(y, region_um)
    return region_rows(y, edges, region_um), edges


def first_pass_assignments(group: np.ndarray, artefact: np.ndarray, features: np.ndarray,
                           amplitude_uv: np.ndarray, params: ClusterParams,
                           groups: list[int] | None = None, first_id: int = 1,
                           progress: ProgressFn = None, cancel: CancelFn = None, workers: int = 1,
                           channel: np.ndarray | None = None, time_s: np.ndarray | None = None,
                           y_column: int | None = None) -> tuple[np.ndarray, dict[int, int]]:
    """Cluster every channel group, keep the clusters fit to be units (:mod:`.refine`), number them.

    Parameters
    ----------
    group, artefact, amplitude_uv
        Per-event channel group, artefact flag and signed peak (from the event table).
    features
        Feature matrix, events x features.
    params
        Clustering settings (validated here).
    groups
        Groups to cluster (default: every group present); events of other groups get
        :data:`NO_UNIT` in the returned array.
    first_id, progress, cancel
        Id of the first new unit; progress callback and cancel check (one step per group).
    workers
        Groups clustered at the same time, each in its own process (see :data:`WORKER_START`;
        threads ran the mixture fits slower: ``bench/bench_sort_path.py --threads``). The result
        does not depend on it: every group's clustering depends only on its own events and seed.
    channel, time_s
        Main (detection) channel and time (s) of every event, for the split test (None: not used).
    y_column
        Feature column of the events' position along a probe: given, groups are clustered by regions
        along it (:mod:`rigside.core.units.regions`), the regions spread over the workers as groups are.

    Returns
    -------
    assignments, unit_group
        Unit id per event (int32; :data:`NO_UNIT` for artefacts and for the unassigned events
        of fragments) and the channel group of every new unit id.
    """
    params.validate()
    warm_up()
    group = np.asarray(group)
    n = _checked_rows(group, artefact, features, amplitude_uv, channel, time_s)
    todo = sorted(int(g) for g in np.unique(group)) if groups is None else sorted(set(groups))
    out = np.full(n, NO_UNIT, dtype=np.int32)
    unit_group: dict[int, int] = {}
    rows_of = _group_rows(group, artefact, todo)
    busy = [i for i in range(len(todo)) if len(rows_of[i])]
    state = {"next": first_id, "done": 0}
    cut = {i: _regions(rows_of[i], features, y_column, params.region_um) for i in busy}
    pending: dict[int, dict[int, np.ndarray]] = {i: {} for i in busy}

    def region_done(result: tuple[tuple[int, int], np.ndarray]) -> None:
        (i, k), labels = result
        pending[i][k] = labels
        regions, edges = cut[i]
        if len(pending[i]) == len(regions):
            parts = [pending[i].pop(j) for j in range(len(regions))]
            number(i, parts[0] if edges is None else
                   join_regions(features[rows_of[i], y_column], regions, parts, edges, params))

    def number(i: int, labels: np.ndarray) -> None:
        used = labels >= 0
        rows, g, labels = rows_of[i][used], todo[i], labels[used]
        n_clusters = int(labels.max()) + 1 if len(labels) else 0
        magnitude = np.bincount(labels, np.abs(amplitude_uv[rows].astype(np.float64)), n_clusters)
        magnitude /= np.maximum(np.bincount(labels, minlength=n_clusters), 1)
        rank = np.empty(n_clusters, dtype=np.int32)
        rank[np.argsort(-magnitude, kind="stable")] = np.arange(n_clusters, dtype=np.int32)
        out[rows] = state["next"] + rank[labels]
        for r in range(n_clusters):
            unit_group[state["next"] + r] = g
        state["next"] += n_clusters
        state["done"] += 1
        report(progress, state["done"] / max(1, len(busy)), f"clustered group {g}")

    report(progress, 0.0, "clustering groups")
    _run_tasks(_tasks(busy, cut, rows_of, todo, features, channel, time_s, params),
               sum(len(cut[i][0]) for i in busy), workers, region_done, cancel)
    report(progress, 1.0, "clustering done")
    return out, unit_group
