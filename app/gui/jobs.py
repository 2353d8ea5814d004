"""The long steps the window runs in the background, as plain functions of core calls.

Each takes ``progress`` and ``cancel`` keywords so the job runner can drive it.
"""

from __future__ import annotations

from pathlib import Path

from rigside.core.errors import RigsideError
from rigside.core.io.atomic import WriteError
from rigside.core.progress import report
from rigside.core.quality.unit_table import unit_metrics_for_events
from rigside.core.signal.features import compute_features
from rigside.core.signal.noise import estimate_noise
from rigside.core.signal.overview import OverviewBuilder, build_overview
from rigside.core.signal.pipeline import NOISE_SHARE, detect
from rigside.core.synthetic.truth import load_truth
from rigside.core.units.first_pass import first_pass
from rigside.core.units.operations import ClusterGroups

LOOKUP_FLOOR_SIGMA = 3.0
"""Events are kept down to this many sigma so a threshold drag down to it is a look-up."""


def analyse(recording, params, truth_path: Path | None = None, overview: OverviewBuilder | None = None,
            progress=None, cancel=None):
    """Noise, detection down to the look-up floor, and the ground truth if there is one.

    With ``overview``, the detection pass also builds the trace overview and caches it
    (``overview.path``; a failed write leaves ``overview.error`` and keeps the detection).
    Returns ``(noise, events, truth)``; ``truth`` is None without a truth file, and the
    :class:`rigside.core.errors.RigsideError` saying why when the file beside the recording is not a
    readable ground truth of ours (the recording is then used without it).
    """
    noise = estimate_noise(recording, params, cancel=cancel,
                           progress=lambda f, m: report(progress, NOISE_SHARE * f, m))
    # given the noise, detect still reports its own span from NOISE_SHARE to 1
    events = detect(recording, params, cancel=cancel, noise=noise, overview=overview, progress=progress)
    if overview is not None:
        save_overview(overview)
    try:
        truth = load_truth(truth_path) if truth_path is not None else None
    except RigsideError as exc:
        truth = exc.with_traceback(None)   # no frames of the job thread kept alive
    return noise, events, truth


def save_overview(builder: OverviewBuilder) -> OverviewBuilder:
    """Cache a complete overview; a failed write is kept in ``builder.error`` for the window to show."""
    try:
        builder.save()
    except WriteError as exc:
        builder.error = str(exc)
    return builder


def overview(recording, filter_params, progress=None, cancel=None) -> OverviewBuilder:
    """Build and cache the trace overview on its own (when no detection pass builds it)."""
    return save_overview(build_overview(recording, filter_params, progress=progress, cancel=cancel))


def features(recording, events, params, progress=None, cancel=None):
    """Features of every stored event (see :func:`rigside.core.signal.features.compute_features`)."""
    return compute_features(recording, events, params, progress=progress, cancel=cancel)


def first_pass_job(events, features, cluster_params, progress=None, cancel=None):
    """The first pass over every group (:func:`rigside.core.units.first_pass.first_pass`)."""
    return first_pass(events, features, cluster_params, progress=progress, cancel=cancel)


def prepare_step_job(op, sorting, progress=None, cancel=None):
    """The slow part of a curation step (its clustering), run before the step is applied."""
    if isinstance(op, ClusterGroups):
        op.progress, op.cancel = progress, cancel
    try:
        op.prepare(sorting)
    finally:
        if isinstance(op, ClusterGroups):
            op.progress = op.cancel = None
    return op


def unit_metrics_job(events, assignments, features, threshold, mp, units, progress=None, cancel=None):
    """Quality numbers of the given units (:func:`rigside.core.quality.unit_table.unit_metrics_for_events`)."""
    return unit_metrics_for_events(events, assignments, features, threshold, mp, progress=progress,
                                   cancel=cancel, only_units=units)
