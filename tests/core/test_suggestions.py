"""Curation suggestions: the evidence against outside references, the ranking on invented
mistakes, and accepting or rejecting them through the undo stack and the journal."""

import math

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.spatial.distance import cosine
from sklearn.metrics import adjusted_rand_score

from rigside.core.errors import CurationError
from rigside.core.params import ClusterParams, MetricParams
from rigside.core.quality.pair_evidence import (
    bhattacharyya_coefficient,
    continuity,
    gaussian_fit,
    refractory_dip,
    split_test,
    waveform_likeness,
)
from rigside.core.quality.suggestions import CSV_COLUMNS, SuggestParams, suggest, suggestions_csv_text
from rigside.core.units.dismissals import DismissSuggestion, dismissed_keys
from rigside.core.units.history import UndoStack, rebuild_history
from rigside.core.units.journal import Journal
from rigside.core.units.operations import Relabel, operation_from_record
from rigside.core.units.refractory import pairs_within
from rigside.core.units.sorting import Sorting

from .suggestion_data import suggestion_sorting

METRIC = MetricParams(refractory_ms=2.0, censored_ms=0.5)


def _brute_pairs(a, b, lo, hi):
    """Reference: every pair's lag from the full difference matrix (numpy, no shortcut)."""
    lag = np.abs(np.subtract.outer(b, a))
    return int(np.count_nonzero((lag >= lo) & (lag < hi)))


@pytest.mark.parametrize("lo, hi", [(0.0, 0.002), (0.0005, 0.002), (0.005, 0.025), (0.001, 0.0015)])
def test_pair_counts_equal_a_brute_force_correlogram(lo, hi):
    rng = np.random.default_rng(3)
    a, b = np.sort(rng.uniform(0, 5, 700)), np.sort(rng.uniform(0, 5, 500))
    assert pairs_within(a, b, lo, hi) == _brute_pairs(a, b, lo, hi)
    assert pairs_within(b, a, lo, hi) == _brute_pairs(a, b, lo, hi)


def test_refractory_dip_follows_its_brute_force_definition():
    rng = np.random.default_rng(4)
    a, b = np.sort(rng.uniform(0, 20, 2000)), np.sort(rng.uniform(0, 20, 1500))
    d = refractory_dip(a, b, 0.0005, 0.002, (0.005, 0.025))
    observed = _brute_pairs(a, b, 0.0005, 0.002)
    expected = _brute_pairs(a, b, 0.005, 0.025) * 0.0015 / 0.020
    assert d.observed == observed and d.expected == pytest.approx(expected)
    assert d.dip.value == pytest.approx(1 - observed / expected)
    assert d.p_value == pytest.approx(stats.poisson.cdf(observed, expected))    # scipy as reference
    # one train with itself: its autocorrelogram, self pairs excluded (brute force without the diagonal)
    own = refractory_dip(a, a, 0.0, 0.002, (0.005, 0.025))
    assert own.observed == _brute_pairs(a, a, 0.0, 0.002) - len(a)


def test_refractory_dip_of_one_neuron_cut_in_two_is_full_and_of_two_neurons_absent():
    events, sorting, who = suggestion_sorting()
    t = sorting.data.time_s
    halves = refractory_dip(t[sorting.events_of(1)], t[sorting.events_of(2)], 0.0005, 0.002)
    apart = refractory_dip(t[who == "A"], t[who == "B"], 0.0005, 0.002)
    assert halves.observed == 0 and halves.dip.value == 1.0 and halves.p_value < 1e-6
    assert abs(apart.dip.value) < 0.4 and apart.p_value > 0.01
    few = refractory_dip(t[:3], t[3:6], 0.0005, 0.002)
    assert math.isnan(few.dip.value) and "fewer than" in few.dip.reason


def test_bhattacharyya_coefficient_equals_the_integral_of_the_root_density_product():
    # 1-D: scipy's quadrature of sqrt(p q) as reference
    m1, s1, m2, s2 = 0.0, 1.0, 1.5, 2.0
    ref, _ = integrate.quad(lambda x: math.sqrt(stats.norm.pdf(x, m1, s1) * stats.norm.pdf(x, m2, s2)), -30, 30)
    got = bhattacharyya_coefficient(np.array([m1]), np.array([[s1 ** 2]]), np.array([m2]), np.array([[s2 ** 2]]))
    assert got == pytest.approx(ref, rel=1e-7)
    # 2-D with correlated covariances: scipy's double quadrature
    ca, cb = np.array([[1.0, 0.4], [0.4, 0.8]]), np.array([[0.6, -0.2], [-0.2, 1.5]])
    ma, mb = np.array([0.0, 0.0]), np.array([1.0, -0.5])
    pa, pb = stats.multivariate_normal(ma, ca), stats.multivariate_normal(mb, cb)
    ref2, _ = integrate.dblquad(lambda y, x: math.sqrt(pa.pdf([x, y]) * pb.pdf([x, y])), -9, 9, -9, 9,
                                epsabs=1e-10)
    assert bhattacharyya_coefficient(ma, ca, mb, cb) == pytest.approx(ref2, rel=1e-5)
    assert bhattacharyya_coefficient(ma, ca, ma, ca) == pytest.approx(1.0)


def test_waveform_likeness_is_the_cosine_on_the_channels_where_either_unit_is_large():
    t = np.linspace(-1, 2, 60)[:, None]
    shape = -np.exp(-t ** 2 / 0.05) + 0.3 * np.exp(-(t - 0.5) ** 2 / 0.1)
    a = shape * np.array([100.0, 60.0, 5.0, 2.0])
    b = shape * np.array([80.0, 70.0, 4.0, 30.0]) + 1.0
    w = waveform_likeness(a, b)
    assert w.channels == (0, 1, 3)             # channel 2 is small on both
    keep = list(w.channels)
    assert w.similarity == pytest.approx(1 - cosine(a[:, keep].ravel(), b[:, keep].ravel()))   # scipy reference
    assert w.size_ratio == pytest.approx(np.linalg.norm(b[:, keep]) / np.linalg.norm(a[:, keep]))


def test_continuity_sees_one_drifting_unit_cut_in_time_and_not_two_units_taking_turns():
    rng = np.random.default_rng(5)
    t = np.sort(rng.uniform(0, 100, 2000))
    x = np.column_stack([t / 10.0, np.zeros_like(t)]) + rng.normal(0, 1, (len(t), 2))   # drifts 10 sd
    first, second = t < 50, t >= 50
    drift = continuity(t[first], x[first], t[second], x[second])
    assert drift.time_overlap == 0.0 and drift.continuity.value > 0.7
    y = rng.normal(0, 1, (len(t), 2)) + np.where(first, 0.0, 5.0)[:, None]
    turns = continuity(t[first], y[first], t[second], y[second])
    assert turns.continuity.value < 0.2
    same_time = continuity(t[::2], x[::2], t[1::2], x[1::2])
    assert math.isnan(same_time.continuity.value) and "same times" in same_time.continuity.reason


def test_split_test_prefers_two_parts_only_for_two_clusters():
    rng = np.random.default_rng(6)
    two = np.vstack([rng.normal(0, 1, (400, 3)), rng.normal([6, 0, 0], 1, (400, 3))])
    one = rng.normal(0, 1, (800, 3))
    s2, s1 = split_test(two, None, ClusterParams()), split_test(one, None, ClusterParams())
    assert s2.delta_bic_per_event > 0 and s2.overlap < 0.05 and s2.smaller_part > 0.45 and s2.first_pass_splits
    truth = np.repeat([0, 1], 400)
    assert adjusted_rand_score(truth, s2.parts) > 0.98          # scikit-learn's index as reference
    assert s1.delta_bic_per_event < 0 and not s1.first_pass_splits
    # reference: scikit-learn's GaussianMixture on the same z-scores (parts far apart: any start finds them)
    from sklearn.mixture import GaussianMixture
    z = (two - two.mean(axis=0)) / two.std(axis=0)
    ref1 = GaussianMixture(1, covariance_type="full", reg_covar=1e-6).fit(z)
    ref2 = GaussianMixture(2, covariance_type="full", reg_covar=1e-6, random_state=0).fit(z)
    np.testing.assert_allclose(s2.delta_bic_per_event, (ref1.bic(z) - ref2.bic(z)) / len(z), rtol=1e-3)


def test_accepting_a_split_makes_the_parts_its_evidence_was_computed_on():
    events, sorting, who = suggestion_sorting()
    split = next(s for s in suggest(events, sorting, METRIC) if s.kind == "split")
    u = split.units[0]
    rows = sorting.events_of(u).copy()
    clustered = int(np.sum(sorting.data.group == sorting.unit(u).group))
    test = split_test(sorting.data.features[rows], events.channel[rows], ClusterParams(), u, clustered)
    assert split.evidence["smaller_part"] == test.smaller_part
    assert split.evidence["delta_bic_per_event"] == test.delta_bic_per_event
    twin = sorting.copy()
    op = split.operation()
    UndoStack(sorting).push(op)
    # the journal record rebuilds the same step: replayed on a copy, the same parts and ids
    again = operation_from_record(Journal.from_text(sorting.journal.to_text()).entries[-1]["op"])
    UndoStack(twin).push(again)
    assert twin.state_equal(sorting) and again.text == op.text == f"Split unit {u} in two"
    new = max(sorting.units)
    moved = sorting.assignments[rows] == new
    assert np.array_equal(moved, test.parts == 1) or np.array_equal(moved, test.parts == 0)
    assert adjusted_rand_score(who[rows], moved) > 0.95       # neurons D and E apart (scikit-learn's index)


def test_gaussian_fit_is_numpys_mean_and_covariance():
    x = np.random.default_rng(7).normal(size=(50, 3))
    m, c = gaussian_fit(x)
    np.testing.assert_allclose(m, x.mean(axis=0))
    np.testing.assert_allclose(c, np.cov(x, rowvar=False), rtol=1e-5)


def test_the_invented_mistakes_are_the_top_suggestions():
    events, sorting, _ = suggestion_sorting()
    found = suggest(events, sorting, METRIC)
    assert [(s.kind, s.units) for s in found[:2]] == [("split", (4,)), ("merge", (1, 2))]
    merge = found[1]
    assert merge.evidence["refractory_dip"] == 1.0 and merge.evidence["feature_overlap"] > 0.2
    split = found[0]
    assert split.evidence["second_channel_share"] > 0.4 and split.evidence["part_overlap"] < 0.05
    assert split.evidence["own_dip"] < 0.7                     # D and E together break the refractory period
    assert all(s.score < merge.score for s in found[2:])
    assert len(suggest(events, sorting, METRIC, params=SuggestParams(top=1))) == 1
    text = suggestions_csv_text(found)
    assert text.splitlines()[0].split(",") == list(CSV_COLUMNS)
    assert text.splitlines()[2].startswith("2,merge,1 2,0,")


def _state(sorting: Sorting):
    return sorting.assignments.tobytes(), sorting.assignments.dtype, sorting.units, sorting.next_id


@pytest.mark.parametrize("index", [0, 1])
def test_accepting_then_undoing_restores_the_sorting_bit_for_bit(index):
    events, sorting, _ = suggestion_sorting()
    stack = UndoStack(sorting)
    before = _state(sorting)
    chosen = suggest(events, sorting, METRIC)[index]
    stack.push(chosen.operation())
    after = _state(sorting)
    assert after != before
    stack.undo()
    assert _state(sorting) == before
    stack.redo()
    assert _state(sorting) == after
    assert [e["action"] for e in sorting.journal.entries] == ["do", "undo", "redo"]


def test_a_rejection_is_a_step_that_changes_nothing_and_is_remembered():
    events, sorting, _ = suggestion_sorting()
    stack = UndoStack(sorting)
    stack.push(Relabel([3], "single unit"))
    before = _state(sorting)
    merge = next(s for s in suggest(events, sorting, METRIC) if s.kind == "merge")
    stack.push(merge.dismissal())
    assert _state(sorting) == before
    assert merge.key in dismissed_keys(sorting.journal.entries)
    assert merge.key not in {s.key for s in suggest(events, sorting, METRIC)}
    # saved as journal text and read back, the rejection holds and the history rebuilds
    journal = Journal.from_text(sorting.journal.to_text())
    assert dismissed_keys(journal.entries) == {merge.key}
    reread = Sorting(sorting.data, sorting.assignments, sorting.units, sorting.next_id, journal)
    reread.origin = sorting.origin          # as a loaded session knows it (the state after the opening step)
    history = rebuild_history(reread)
    assert history is not None and isinstance(history[-1], DismissSuggestion)
    stack.undo()
    assert dismissed_keys(sorting.journal.entries) == set()
    assert merge.key in {s.key for s in suggest(events, sorting, METRIC)}


def test_a_rejection_lapses_when_its_units_change_and_refuses_stale_replays():
    events, sorting, _ = suggestion_sorting()
    stack = UndoStack(sorting)
    split = next(s for s in suggest(events, sorting, METRIC) if s.kind == "split")
    stale = split.dismissal()
    stack.push(split.dismissal())
    stack.push(split.operation())          # the unit changes: the rejection no longer names it as it is
    assert split.key in dismissed_keys(sorting.journal.entries)
    assert all(s.key != split.key for s in suggest(events, sorting, METRIC, params=SuggestParams(min_score=0)))
    with pytest.raises(CurationError, match="events have changed"):
        stale.do(sorting)
    with pytest.raises(CurationError, match="must name 2"):
        DismissSuggestion("merge", [1], "0" * 16)
    assert dismissed_keys([]) == set()     # journals written before rejections existed
