import numpy as np
import pytest
from sklearn.metrics import adjusted_rand_score

from rigside.core.errors import ParamError, RigsideError
from rigside.core.progress import Cancelled
from rigside.core.units.clustering import ClusterParams, cluster_features, first_pass_assignments, merge_components
from rigside.core.units.first_pass import first_pass
from rigside.core.units.sorting import NO_UNIT

from .sorting_data import make_events


def _best_jaccard(truth: np.ndarray, found: np.ndarray) -> dict[int, float]:
    """For every true cluster, the best Jaccard index |A & B| / |A | B| over found units (Jaccard 1912)."""
    out = {}
    for t in np.unique(truth[truth >= 0]):
        a = truth == t
        out[int(t)] = max(np.sum(a & (found == u)) / np.sum(a | (found == u)) for u in np.unique(found[a]))
    return out


def test_well_separated_clusters_are_found_per_group():
    events, x, names, truth = make_events(n=6000, n_groups=3, clusters=3, seed=1)
    assign, unit_group = first_pass_assignments(events.group, events.artefact, x, events.amplitude_uv,
                                                ClusterParams(seed=4))
    # ground truth: 3 clusters per group, found by BIC without being told
    assert len(unit_group) == 9
    assert sorted(unit_group.values()) == [0, 0, 0, 1, 1, 1, 2, 2, 2]
    assert np.all(assign[events.artefact] == NO_UNIT)
    assert np.all(assign[~events.artefact] >= 1)
    # reference measure: scikit-learn's adjusted Rand index (Hubert & Arabie 1985)
    ok = ~events.artefact
    assert adjusted_rand_score(truth[ok], assign[ok]) > 0.99
    assert min(_best_jaccard(truth, assign).values()) > 0.99


def test_unit_ids_are_unique_across_groups_and_ordered_by_peak_magnitude():
    events, x, names, truth = make_events(n=4000, n_groups=2, clusters=3, seed=2)
    assign, unit_group = first_pass_assignments(events.group, events.artefact, x, events.amplitude_uv,
                                                ClusterParams(seed=0))
    assert sorted(unit_group) == list(range(1, 7))
    for g in (0, 1):
        ids = sorted(u for u, gg in unit_group.items() if gg == g)
        mags = [np.abs(events.amplitude_uv[assign == u]).mean() for u in ids]
        assert mags == sorted(mags, reverse=True)
        assert np.all(events.group[np.isin(assign, ids)] == g)


def test_same_seed_same_result_and_forced_k():
    events, x, names, truth = make_events(n=3000, n_groups=1, clusters=3, seed=3)
    p = ClusterParams(seed=7, fit_events=500)
    a1 = cluster_features(x, p)
    a2 = cluster_features(x, p)
    assert np.array_equal(a1, a2)
    forced = cluster_features(x, p, k=5)
    assert forced.max() + 1 == 5
    assert cluster_features(x, ClusterParams(k=1)).max() == 0


def test_subsampled_fit_still_labels_every_event_correctly():
    events, x, names, truth = make_events(n=20000, n_groups=1, clusters=4, seed=5)
    labels = cluster_features(x, ClusterParams(fit_events=800, seed=1))
    ok = truth >= 0
    assert labels.max() + 1 == 4
    assert adjusted_rand_score(truth[ok], labels[ok]) > 0.99


def test_groups_subset_and_first_id():
    events, x, names, truth = make_events(n=3000, n_groups=3, clusters=2, seed=6)
    assign, unit_group = first_pass_assignments(events.group, events.artefact, x, events.amplitude_uv,
                                                ClusterParams(), groups=[1], first_id=40)
    assert set(unit_group) == {40, 41} and set(unit_group.values()) == {1}
    assert np.all(assign[events.group != 1] == NO_UNIT)


def test_bad_inputs_are_refused_with_specific_messages():
    events, x, names, truth = make_events(n=500, n_groups=1, clusters=2, seed=7)
    bad = x.copy()
    bad[3, 1] = np.nan
    with pytest.raises(RigsideError, match="features must be finite"):
        cluster_features(bad, ClusterParams())
    with pytest.raises(ParamError, match="largest cluster count must be an integer from 3"):
        ClusterParams(k_min=3, k_max=2).validate()
    with pytest.raises(ParamError, match="clustering parameter must be one of"):
        ClusterParams.from_dict({"kk": 3})
    with pytest.raises(RigsideError, match="one row per event"):
        first_pass_assignments(events.group, events.artefact, x[:-1], events.amplitude_uv, ClusterParams())


def test_progress_and_cancel():
    events, x, names, truth = make_events(n=1500, n_groups=3, clusters=2, seed=8)
    seen = []
    first_pass_assignments(events.group, events.artefact, x, events.amplitude_uv, ClusterParams(),
                           progress=lambda f, m: seen.append(f))
    assert seen[0] == 0.0 and seen[-1] == 1.0 and seen == sorted(seen)
    with pytest.raises(Cancelled):
        first_pass_assignments(events.group, events.artefact, x, events.amplitude_uv, ClusterParams(),
                               cancel=lambda: True)


def test_first_pass_entry_point_opens_the_journal():
    events, x, names, truth = make_events(n=2000, n_groups=2, clusters=2, seed=9)
    s = first_pass(events, x, seed=11, feature_names=names)
    assert len(s.journal) == 1
    entry = s.journal.entries[0]
    assert entry["action"] == "do" and entry["op"]["op"] == "cluster_groups"
    assert entry["op"]["params"]["seed"] == 11 and entry["op"]["created"] == s.unit_ids()
    assert all(u.label == "unreviewed" for u in s.units.values())


def test_components_of_one_curved_cluster_are_merged():
    # two arcs ("bananas") far apart: BIC spends many Gaussian components on each arc, and
    # merging by misclassification probability (Hennig 2010) [memory] joins them back
    rng = np.random.default_rng(0)
    t = rng.uniform(0, np.pi, 6000)
    x = np.column_stack([6 * np.cos(t), 6 * np.sin(t)]) + rng.normal(0, 0.5, (6000, 2))
    x[3000:, 1] -= 20
    truth = np.repeat([0, 1], 3000)
    unmerged = cluster_features(x.astype(np.float32), ClusterParams(seed=1, merge_overlap=1.0))
    merged = cluster_features(x.astype(np.float32), ClusterParams(seed=1))
    assert unmerged.max() + 1 > 2
    assert merged.max() + 1 == 2
    assert adjusted_rand_score(truth, merged) == 1.0


def test_merge_components_by_hand():
    # two components that share half their events are merged; a third, apart, is kept
    tau = np.array([[0.5, 0.5, 0.0]] * 10 + [[0.0, 0.0, 1.0]] * 10)
    assert merge_components(tau, 0.02) == [[0, 1], [2]]
    assert merge_components(tau, 1.0) == [[0], [1], [2]]


def test_tiny_inputs_give_one_cluster():
    x = np.random.default_rng(0).normal(size=(3, 4)).astype(np.float32)
    assert cluster_features(x, ClusterParams()).tolist() == [0, 0, 0]
    assert cluster_features(x[:1], ClusterParams(), k=2).tolist() == [0]
    assert cluster_features(np.ones((5, 2), np.float32), ClusterParams()).tolist() == [0] * 5
    assert len(cluster_features(np.zeros((0, 2), np.float32), ClusterParams())) == 0


OVERLAP = """
import json
from threadpoolctl import threadpool_info, threadpool_limits
from rigside.core.units.clustering import single_threaded_pools

def sizes():
    return sorted(i["num_threads"] for i in threadpool_info())

out = {}
with threadpool_limits(limits=2):               # a known starting point above one thread
    out["before"] = sizes()
    first, second = single_threaded_pools(), single_threaded_pools()
    first.__enter__()                            # caller A enters
    second.__enter__()                           # caller B (another thread) enters
    first.__exit__(None, None, None)             # A leaves while B still runs
    out["inside"] = sizes()
    second.__exit__(None, None, None)            # the last caller leaves
    out["after"] = sizes()
print(json.dumps(out))
"""


def test_overlapping_pool_limits_restore_the_original_only_when_the_last_caller_leaves():
    # threadpoolctl's own report (threadpool_info) is the oracle for the pool sizes. A fresh
    # process: threadpoolctl lets only one Python thread control OpenBLAS (the first to set a
    # limit, while it lives), and earlier tests' worker threads may hold that role here.
    import json
    import subprocess
    import sys
    from pathlib import Path

    root = Path(__file__).resolve().parents[2]
    r = subprocess.run([sys.executable, "-c", OVERLAP], cwd=root, capture_output=True, text=True)
    assert r.returncode == 0, r.stderr[-2000:]
    out = json.loads(r.stdout.strip().splitlines()[-1])
    if max(out["before"], default=1) < 2:
        pytest.skip("no thread pool here can run more than one thread")
    assert max(out["inside"]) == 1 and out["after"] == out["before"]
