"""The pair fit of the overlap pass: two templates at two times, least-squares amplitudes, and a
template fitted at another size is not taken for its unit."""

import numpy as np

from rigside.core.signal.overlaps import SCALE_RANGE, _Group, _pair_fit

LENGTH, DEAD, CHANNELS = 24, 8, 2


def _group() -> _Group:
    t = np.arange(LENGTH)
    a = np.stack([-8 * np.exp(-0.5 * ((t - 8) / 1.5) ** 2), -3 * np.exp(-0.5 * ((t - 8) / 1.5) ** 2)], axis=1)
    b = np.stack([-2 * np.exp(-0.5 * ((t - 8) / 2.5) ** 2), -7 * np.exp(-0.5 * ((t - 8) / 2.5) ** 2)], axis=1)
    scaled = np.stack([a, b])
    return _Group(0, np.arange(CHANNELS), np.array([3, 4]), scaled, np.zeros_like(scaled), [], None)


def _window(g: _Group, scale_b: float, rng) -> np.ndarray:
    """A residual window: unit 0 at the event (already subtracted) and
    unit 1 at the find, ``scale_b`` times its template, in unit-variance noise."""
    x = rng.normal(size=(LENGTH + 2 * DEAD, CHANNELS))
    x[DEAD:DEAD + LENGTH] += scale_b * g.scaled[1]
    return x


def test_a_hidden_spike_of_the_other_unit_is_found_at_its_size():
    rng = np.random.default_rng(0)
    g = _group()
    x = np.stack([_window(g, 1.0, rng) for _ in range(20)])
    i, j, ok = _pair_fit(x, np.full(20, -5), g, DEAD, 4.0, np.full(20, 16.0),
                         (np.zeros(20), np.zeros(20), np.zeros(20, np.int64)))
    assert ok.all() and (i == 0).all() and (j == 1).all()


def test_a_spike_far_smaller_than_every_template_is_not_given_to_a_unit():
    # scale 0.35 of unit 1 is below SCALE_RANGE: least squares would give 0.35, clipping would give the
    # bound and keep the fit; the fit is left out instead (the misfit allowance is generous here)
    assert 0.35 < SCALE_RANGE[0]
    rng = np.random.default_rng(1)
    g = _group()
    x = np.stack([_window(g, 0.35, rng) for _ in range(20)])
    _, _, ok = _pair_fit(x, np.full(20, -5), g, DEAD, 100.0, np.full(20, 1.0),
                         (np.zeros(20), np.zeros(20), np.zeros(20, np.int64)))
    assert not ok.any()
