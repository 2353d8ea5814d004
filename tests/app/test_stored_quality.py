"""A session opens with the quality numbers it was saved with: the unit list shows them without computing
them again, they equal a fresh computation (unit_metrics_for_events on the reopened session, the
reference), a changed unit is computed again alone, and a session saved without numbers computes all."""

from __future__ import annotations

import numpy as np
import pytest

from rigside.core.quality.stored_numbers import compute_numbers, table_rows
from rigside.core.units.session import load_session, save_session
from rigside.gui.sorting_controller import METRICS_SLOT
from rigside.gui.workers import Runner
from rigside.sample_data import demo_path
from tests.app.conftest import sorted_copy


@pytest.fixture(scope="module")
def sorted_demo(tmp_path_factory):
    """A copy of the demo and the session `rigside sort` wrote of it (with its quality numbers)."""
    return sorted_copy(demo_path(), tmp_path_factory.mktemp("stored"), "demo.session.h5")[1]


@pytest.fixture
def metric_jobs(monkeypatch):
    """The units of every quality-number job submitted to a window's runner."""
    units: list[list[int]] = []
    original = Runner.submit

    def spy(self, slot, *args, **kwargs):
        if slot == METRICS_SLOT:
            units.append(list(args[-1]))
        return original(self, slot, *args, **kwargs)
    monkeypatch.setattr(Runner, "submit", spy)
    return units


def _equal_to_fresh(shown: dict, path) -> bool:
    fresh = table_rows(compute_numbers(load_session(path)))
    if sorted(shown) != sorted(fresh):
        return False
    for u, row in fresh.items():
        for c, v in row.items():
            a, b = np.asarray(shown[u][c]), np.asarray(v)
            if not np.array_equal(a, b, equal_nan=a.dtype.kind == "f"):
                return False
    return True


def _open(win, path) -> None:
    win.units.files.timer.stop()
    assert win.open_path(str(path))
    assert win.wait_idle(60) and win.last_error is None


def test_a_sorted_session_shows_its_stored_numbers_without_computing(window, sorted_demo, metric_jobs):
    _open(window, sorted_demo)
    ctl = window.units
    assert metric_jobs == [] and ctl.metrics
    assert _equal_to_fresh(ctl.metrics, sorted_demo)
    model = window.unit_panels["list"].table.model()
    # one row per unit and one per group's unassigned events
    assert model.rowCount() == len(ctl.sorting.units) + len(ctl.sorting.pool_counts())


def test_a_changed_unit_is_computed_again_and_saved_numbers_stay_current(window, sorted_demo, metric_jobs,
                                                                          tmp_path):
    _open(window, sorted_demo)
    ctl = window.units
    counts = ctl.sorting.counts()
    group = ctl.sorting.unit(max(counts, key=counts.get)).group
    pair = sorted((u for u in counts if ctl.sorting.unit(u).group == group), key=counts.get)[-2:]
    assert ctl.merge(pair) and window.wait_idle(60)
    changed = [u for u in ctl.sorting.unit_ids() if u not in counts or u in pair]   # the merged unit only
    assert len(changed) == 1 and metric_jobs == [changed]
    saved = tmp_path / "curated.h5"
    assert ctl.files.save(saved) and window.wait_idle(60)
    assert _equal_to_fresh(ctl.metrics, saved)
    metric_jobs.clear()
    _open(window, saved)
    assert metric_jobs == [] and _equal_to_fresh(window.units.metrics, saved)


def test_a_session_saved_without_numbers_computes_them_all(window, sorted_demo, metric_jobs, tmp_path):
    old = load_session(sorted_demo)
    old.unit_numbers = None                         # as sessions were saved before numbers were stored
    path = save_session(tmp_path / "old.h5", old)
    _open(window, path)
    assert metric_jobs == [old.sorting.unit_ids()]
    assert _equal_to_fresh(window.units.metrics, path)
