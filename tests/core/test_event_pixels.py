"""Dense event marks: which view pixels hold an event at or above its channel's threshold.

Checked against a plain per-event numpy version of the same rule (pixel column
``floor((sample - start) * width / (stop - start))``, clipped to the last column; common practice, no
source), with artefacts, thresholds per channel, hidden channels and a partial view.
"""

from __future__ import annotations

import numpy as np

from rigside.core.event_pixels import ARTEFACT, EVENT, event_pixels
from rigside.core.events import EventTable


def _table(n: int = 20000, channels: int = 8, n_samples: int = 3_000_000, seed: int = 0) -> EventTable:
    rng = np.random.default_rng(seed)
    sample = np.sort(rng.integers(0, n_samples, n))
    return EventTable(sample=sample, channel=rng.integers(0, channels, n), group=np.zeros(n, int),
                      amplitude_uv=-rng.uniform(30, 100, n).astype(np.float32),
                      amplitude_sigma=rng.uniform(3.0, 10.0, n).astype(np.float32), artefact=rng.random(n) < 0.05,
                      rate_hz=30000.0, n_samples=n_samples, sigma_uv=np.full(channels, 10.0), floor_sigma=3.0)


def _reference(ev: EventTable, lane, thr, a, z, width):
    out = np.zeros((lane.max() + 1, width), dtype=np.uint8)
    keep = (ev.sample >= a) & (ev.sample < z) & (lane[ev.channel] >= 0)
    keep &= ev.amplitude_sigma >= thr[ev.channel]
    px = np.minimum(((ev.sample[keep] - a) * (width / (z - a))).astype(np.int64), width - 1)
    bits = np.where(ev.artefact[keep], ARTEFACT, EVENT).astype(np.uint8)
    np.bitwise_or.at(out, (lane[ev.channel[keep]], px), bits)
    return out, int(keep.sum())


def test_pixels_match_the_per_event_rule():
    ev = _table()
    lane = np.array([3, -1, 0, 1, -1, 2, 4, 5])          # two channels hidden, lanes in another order
    thr = np.linspace(4.0, 8.0, 8).astype(np.float32)
    for a, z, width in ((0, ev.n_samples, 1000), (123_456, 987_654, 333), (5, 6, 10), (0, 30, 1)):
        flags, passing = event_pixels(ev, lane, thr, a, z, width)
        ref, count = _reference(ev, lane, thr, a, z, width)
        assert passing == count
        np.testing.assert_array_equal(flags, ref)


def test_no_shown_events_gives_empty_flags():
    ev = _table(n=100)
    flags, passing = event_pixels(ev, np.array([0, -1, -1, -1, -1, -1, -1, -1]), np.full(8, 99.0), 0, 10, 50)
    assert passing == 0 and flags.shape == (1, 50) and not flags.any()
