"""Entry point of sorting: detected events and features to a journaled first-pass sorting."""

from __future__ import annotations

import numpy as np

from rigside.core.events import EventTable
from rigside.core.progress import CancelFn, ProgressFn
from rigside.core.units.clustering import ClusterParams
from rigside.core.units.history import UndoStack
from rigside.core.units.operations import ClusterGroups
from rigside.core.units.sorting import Sorting, SortingData


def first_pass(events: EventTable, features, params: ClusterParams | None = None,
               seed: int | None = None, feature_names=None, progress: ProgressFn = None,
               cancel: CancelFn = None, workers: int = 1) -> Sorting:
    """Cluster every channel group and return the sorting, its journal opened by this step.

    Parameters
    ----------
    events
        The event table (its ``group``, ``artefact``, ``amplitude_uv`` and times are used).
    features
        Either an object with ``values`` (events x features, float32) and ``names``, or a plain
        matrix together with ``feature_names``.
    params
        Clustering settings (default :class:`ClusterParams`).
    seed
        Overrides ``params.seed`` when given.
    feature_names
        Column names when ``features`` is a plain matrix (default ``f0, f1, ...``).
    progress, cancel
        Progress callback and cancel check.
    workers
        Groups clustered at the same time (processes); the sorting does not depend on it.

    Returns
    -------
    Sorting
        Artefact events in no unit (id -1), every other event in a unit labelled "unreviewed".
    """
    if hasattr(features, "values") and hasattr(features, "names"):
        values, names = features.values, list(features.names)
    else:
        values = np.asarray(features)
        names = list(feature_names) if feature_names is not None else \
            [f"f{i}" for i in range(values.shape[1] if values.ndim == 2 else 0)]
    params = ClusterParams(**(params or ClusterParams()).to_dict())
    if seed is not None:
        params.seed = seed
    sorting = Sorting(SortingData.from_events(events, values, names))
    UndoStack(sorting).push(ClusterGroups(params, progress=progress, cancel=cancel, workers=workers))
    return sorting
