"""An invented sorting with known mistakes, for the suggestion tests (core, command line)."""

from __future__ import annotations

import numpy as np

from rigside.core.events import EventTable
from rigside.core.units.sorting import Sorting, SortingData, Unit

SECONDS = 60.0
RATE_HZ = 30000.0
REFRACTORY_S = 0.0025


def refractory_train(rng: np.random.Generator, rate: float, seconds: float = SECONDS) -> np.ndarray:
    """Poisson spike times with a dead period of :data:`REFRACTORY_S` after each spike."""
    isi = REFRACTORY_S + rng.exponential(1 / rate - REFRACTORY_S, int(rate * seconds * 1.5) + 10)
    t = np.cumsum(isi)
    return t[t < seconds]


# neuron: (rate Hz, group, detection channel, feature centre)
NEURONS = {"A": (25.0, 0, 0, (0.0, 0.0, 0.0)), "B": (15.0, 0, 1, (5.0, 0.0, 0.0)),
           "D": (15.0, 1, 4, (0.0, 0.0, 0.0)), "E": (15.0, 1, 6, (0.0, 7.0, 0.0)),
           "F": (10.0, 1, 5, (7.0, 7.0, 0.0))}


def suggestion_sorting(seed: int = 0) -> tuple[EventTable, Sorting, np.ndarray]:
    """Five units with known mistakes: neuron A cut in two by a plane through its centre
    (units 1 and 2), neuron B alone (unit 3), neurons D and E, on different channels, in one
    unit (4), neuron F alone (unit 5). Groups: 0 (units 1-3) and 1 (units 4, 5).

    Returns the event table, the sorting and the neuron name of every event.
    """
    rng = np.random.default_rng(seed)
    times, names, feats = [], [], []
    for name, (rate, _, _, centre) in NEURONS.items():
        t = refractory_train(rng, rate)
        times.append(t)
        names.append(np.full(len(t), name))
        feats.append(np.asarray(centre) + rng.normal(0.0, 1.0, (len(t), 3)))
    t, who, x = np.concatenate(times), np.concatenate(names), np.vstack(feats)
    order = np.argsort(t, kind="stable")
    t, who, x = t[order], who[order], x[order]
    group = np.array([NEURONS[w][1] for w in who], dtype=np.int32)
    channel = np.array([NEURONS[w][2] for w in who], dtype=np.int64)
    unit_of = {"A": 1, "B": 3, "D": 4, "E": 4, "F": 5}
    assign = np.array([unit_of[w] for w in who], dtype=np.int32)
    assign[(who == "A") & (x[:, 0] > 0)] = 2
    n = len(t)
    events = EventTable(sample=np.round(t * RATE_HZ).astype(np.int64), channel=channel, group=group,
                        amplitude_uv=-(50.0 + 5 * x[:, 0]), amplitude_sigma=np.full(n, 6.0),
                        artefact=np.zeros(n, bool), rate_hz=RATE_HZ, n_samples=int(SECONDS * RATE_HZ),
                        sigma_uv=np.full(8, 10.0), floor_sigma=4.0)
    features = np.column_stack([x, -(50.0 + 5 * x[:, 0])]).astype(np.float32)
    data = SortingData.from_events(events, features, ["PC1", "PC2", "PC3", "peak_uv"])
    units = {u: Unit(group=0 if u <= 3 else 1) for u in range(1, 6)}
    return events, Sorting(data, assign, units, next_id=6), who
