"""Neighbourhoods of probe sites against a direct distance computation."""

from __future__ import annotations

import numpy as np
import pytest

from rigside.core.errors import ParamError
from rigside.core.params import Params
from rigside.core.signal.neighbourhoods import neighbourhoods
from rigside.core.synthetic.probe_synth import probe_layout


def brute_force(positions, shank, radius):
    """Every pair's distance (numpy), the O(sites^2) reference the cell grid must agree with."""
    d = np.hypot(*(positions[:, None, :] - positions[None, :, :]).transpose(2, 0, 1))
    return [np.flatnonzero((d[c] <= radius) & (shank == shank[c])) for c in range(len(positions))]


@pytest.mark.parametrize("radius", [5.0, 20.0, 50.0, 75.0, 1000.0])
def test_grid_neighbourhoods_equal_all_pair_distances(radius):
    # reference: direct distances in numpy (common practice, no source)
    rng = np.random.default_rng(1)
    positions = rng.uniform(0, 300, (120, 2)).round(1)
    shank = rng.integers(0, 3, 120)
    nb = neighbourhoods(positions, shank, radius)
    for c, expected in enumerate(brute_force(positions, shank, radius)):
        np.testing.assert_array_equal(nb.of(c), expected)


def test_two_column_probe_neighbourhoods_are_symmetric_and_hold_the_site():
    x, y, shank = probe_layout(64, columns=2, pitch_um=20.0, shanks=2)
    nb = neighbourhoods(np.column_stack([x, y]), shank, 50.0)
    pairs = {(c, int(d)) for c in range(64) for d in nb.of(c)}
    assert all((d, c) in pairs for c, d in pairs) and all((c, c) in pairs for c in range(64))
    # a site in the middle of a column: itself, 2 above and 2 below in its column (40 um), and in the
    # other column the sites at dy 0, +-20, +-40 (distance sqrt(20^2 + 40^2) = 44.7 um <= 50)
    assert nb.sizes[16] == 10
    assert not set(nb.of(16).tolist()) & set(range(32, 64))   # never across shanks


def test_site_exactly_at_the_radius_is_a_neighbour():
    nb = neighbourhoods(np.array([[0.0, 0.0], [0.0, 50.0], [0.0, 50.5]]), np.zeros(3, int), 50.0)
    assert nb.of(0).tolist() == [0, 1]


@pytest.mark.parametrize("radius", [0.0, -3.0, float("nan")])
def test_radius_must_be_positive(radius):
    with pytest.raises(ParamError, match="neighbourhood radius must be above 0"):
        neighbourhoods(np.zeros((2, 2)), np.zeros(2, int), radius)


def test_radius_parameter_is_validated_and_read_from_the_parameter_file(tmp_path):
    (tmp_path / "p.toml").write_text("[probe]\nradius_um = 35\n")
    assert Params.load_toml(tmp_path / "p.toml").probe.radius_um == 35.0
    bad = Params()
    bad.probe.radius_um = 0.0
    with pytest.raises(ParamError, match="neighbourhood radius must be above 0 and at most 10000 um, got 0 um"):
        bad.validate()
