"""Invented events with known clusters, for the clustering, sorting, session and export tests."""

from __future__ import annotations

import numpy as np

from rigside.core.events import EventTable


def make_events(n: int = 6000, n_groups: int = 3, clusters: int = 3, d: int = 5, seed: int = 0,
                separation: float = 12.0, artefact_fraction: float = 0.01,
                rate_hz: float = 30000.0, seconds: float = 60.0):
    """Events spread over groups, each group holding ``clusters`` Gaussian clusters.

    Returns
    -------
    events, features, names, truth
        The event table, float32 features (n x d), feature names and the true cluster of
        every event (unique across groups; -1 for artefacts).
    """
    rng = np.random.default_rng(seed)
    group = rng.integers(0, n_groups, n).astype(np.int32)
    lab = rng.integers(0, clusters, n)
    # cluster c sits `separation` noise sd along axis c (clusters <= d), around a random group offset
    centers = rng.normal(0.0, 3.0, (n_groups, 1, d)) + separation * np.eye(d)[:clusters][None]
    features = (centers[group, lab] + rng.normal(0, 1, (n, d))).astype(np.float32)
    n_samples = int(rate_hz * seconds)
    sample = np.sort(rng.integers(0, n_samples, n))
    artefact = rng.random(n) < artefact_fraction
    truth = np.where(artefact, -1, group * clusters + lab)
    events = EventTable(sample=sample, channel=group * 4, group=group,
                        amplitude_uv=-(40.0 + 15.0 * lab + rng.normal(0, 2, n)),
                        amplitude_sigma=np.full(n, 6.0), artefact=artefact, rate_hz=rate_hz,
                        n_samples=n_samples, sigma_uv=np.full(4 * n_groups, 10.0), floor_sigma=4.0)
    names = [f"f{i}" for i in range(d)]
    return events, features, names, truth


def sorted_demo(folder, seconds: float, seed: int):
    """The demo scenario written to ``folder`` for ``seconds`` with ``seed``, sorted with the default
    parameters (detection, features, first pass, overlap pass).

    Returns
    -------
    params, events, sorting, truth
    """
    from rigside.core.io.recording import open_recording
    from rigside.core.params import Params
    from rigside.core.runs.sort import sort_recording
    from rigside.core.synthetic.settings import SynthSettings
    from rigside.core.synthetic.synth import write_practice
    from rigside.core.synthetic.truth import load_truth

    path = folder / f"demo{seconds:g}.bin"
    write_practice(path, SynthSettings(seconds=seconds, seed=seed))
    rec = open_recording(path)
    params = Params()
    events, sorting = sort_recording(rec, params)
    return params, events, sorting, load_truth(rec.truth_path())
