"""A unit's position (median of its events' positions) and its drift along the probe (Theil–Sen slope
of event y_um against time), alone and as columns of the unit table, its CSV and the export manifest."""

import csv
import json

import numpy as np
import pytest
from scipy import stats

from rigside.core.errors import RigsideError
from rigside.core.events import EventTable
from rigside.core.quality.unit_position import (
    MIN_DRIFT_EVENTS,
    MIN_DRIFT_SPAN_S,
    POSITION_COLUMNS,
    position_drift,
    unit_position,
)
from rigside.core.quality.unit_table import COLUMNS, described_columns, unit_metrics_for_events, unit_metrics_table
from rigside.core.quality.unit_table_io import write_unit_table_csv

RATE, SECONDS = 30000.0, 120.0


def drifting_train(seed=0, n=250, slope_um_per_min=12.0, spread_um=3.0, strays=0):
    """Invented: event times over two minutes, y moving linearly with Gaussian scatter, a few strays."""
    rng = np.random.default_rng(seed)
    t = np.sort(rng.uniform(0, SECONDS, n))
    y = 100.0 + slope_um_per_min * t / 60.0 + rng.normal(0, spread_um, n)
    if strays:   # another unit's events, far along the probe, in the last quarter of the recording
        pick = rng.choice(np.flatnonzero(t > 0.75 * SECONDS), strays, replace=False)
        y[pick] = rng.uniform(300, 400, strays)
    return t, y


def test_position_is_the_median_of_the_event_positions():
    x = np.array([10.0, 11.0, 12.0, 13.0, 400.0])
    y = np.array([50.0, 52.0, 51.0, 49.0, -300.0])
    assert unit_position(x, y) == (12.0, 50.0)          # one stray event moves a mean, not the median
    with pytest.raises(RigsideError, match="needs events"):
        unit_position(np.empty(0), np.empty(0))
    with pytest.raises(RigsideError, match="finite"):
        unit_position(np.array([np.nan]), np.array([1.0]))


def test_drift_is_the_theil_sen_slope_in_um_per_minute():
    t, y = drifting_train()
    got = position_drift(t, y)
    # reference implementation: scipy.stats.theilslopes (Sen 1968) on minutes
    assert got.value == pytest.approx(stats.theilslopes(y, t / 60.0).slope, rel=1e-12)
    assert got.value == pytest.approx(12.0, rel=0.1)
    assert got.reason == ""


def test_drift_ignores_stray_events_a_least_squares_line_follows():
    t, y = drifting_train(seed=1, strays=12)            # 5% of the events belong elsewhere, late and far
    assert position_drift(t, y).value == pytest.approx(12.0, rel=0.15)
    assert np.polyfit(t / 60.0, y, 1)[0] > 24.0         # least squares (numpy polyfit) is pulled to over twice


def test_long_trains_enter_spread_evenly_and_keep_the_slope():
    t, y = drifting_train(seed=2, n=20000)
    full = stats.theilslopes(y[::4], t[::4] / 60.0).slope   # 5000 events: the reference on a denser subset
    got = position_drift(t, y, max_events=500).value
    assert got == pytest.approx(full, rel=0.05)


def test_drift_is_undefined_with_a_reason():
    t, y = drifting_train(n=MIN_DRIFT_EVENTS - 1)
    assert np.isnan(position_drift(t, y).value)
    assert f"at least {MIN_DRIFT_EVENTS}" in position_drift(t, y).reason
    same = position_drift(np.full(20, 3.0), np.arange(20.0))
    assert np.isnan(same.value) and same.reason == "all events share one time"
    brief = position_drift(np.linspace(0.0, MIN_DRIFT_SPAN_S * 0.9, 50), np.arange(50.0))
    assert np.isnan(brief.value) and f"at least {MIN_DRIFT_SPAN_S:g} s" in brief.reason
    assert np.isfinite(position_drift(np.linspace(0.0, MIN_DRIFT_SPAN_S, 50), np.arange(50.0)).value)
    with pytest.raises(RigsideError, match="sorted"):
        position_drift(np.arange(20.0)[::-1], np.arange(20.0))


def probe_events(seed=0):
    """Invented probe events: unit 1 drifting up, unit 2 still, events in no unit (-1)."""
    rng = np.random.default_rng(seed)
    parts = []
    for unit, chan, y0, slope in ((1, 3, 100.0, 12.0), (2, 5, 220.0, 0.0), (-1, 4, 160.0, 0.0)):
        t, y = drifting_train(seed + unit + 5, 300, slope)
        y += y0 - 100.0
        parts.append((t, np.full(len(t), unit), np.full(len(t), chan), rng.normal(16.0, 2.0, len(t)), y))
    t, u, c, x, y = (np.concatenate(p) for p in zip(*parts))
    order = np.argsort(t, kind="stable")
    sample = np.round(t[order] * RATE).astype(np.int64)
    amp = -np.full(len(t), 80.0)
    ev = EventTable(sample=sample, channel=c[order].astype(np.int32), group=np.zeros(len(t), np.int32),
                    amplitude_uv=amp, amplitude_sigma=-amp / 10.0, artefact=np.zeros(len(t), bool), rate_hz=RATE,
                    n_samples=int(SECONDS * RATE), sigma_uv=np.full(8, 10.0), floor_sigma=4.0,
                    x_um=x[order], y_um=y[order])
    return ev, u[order]


def test_unit_table_holds_position_and_drift_on_a_probe(tmp_path):
    ev, units = probe_events()
    tab = unit_metrics_for_events(ev, units, None, 4.0)
    assert list(described_columns(tab)) == [*COLUMNS, *POSITION_COLUMNS]
    assert tab["unit"].tolist() == [1, 2]
    for row, u in enumerate((1, 2)):
        mine = units == u
        assert tab["y_um"][row] == pytest.approx(np.median(ev.y_um[mine]))
        assert tab["x_um"][row] == pytest.approx(np.median(ev.x_um[mine]))
        assert tab["drift_um_per_min"][row] == pytest.approx(
            stats.theilslopes(ev.y_um[mine], ev.time_s[mine] / 60.0).slope, rel=1e-5)   # float32 positions
    assert tab["drift_um_per_min"][0] == pytest.approx(12.0, rel=0.1)
    assert abs(tab["drift_um_per_min"][1]) < 1.0
    again = unit_metrics_for_events(ev, units, None, 4.0, only_units=[2])
    assert again["drift_um_per_min"][0] == tab["drift_um_per_min"][1]

    path = write_unit_table_csv(tab, tmp_path / "units.csv")
    lines = path.read_text().splitlines()
    assert "# drift_um_per_min: " + POSITION_COLUMNS["drift_um_per_min"] in lines
    rows = list(csv.DictReader(ln for ln in lines if not ln.startswith("#")))
    assert list(rows[0])[-len(POSITION_COLUMNS):] == list(POSITION_COLUMNS)
    assert float(rows[0]["y_um"]) == pytest.approx(tab["y_um"][0], rel=1e-5)   # a number, 6 digits
    assert rows[0]["drift_reason"] == ""


def test_bundle_tables_have_no_position_columns(tmp_path):
    ev, units = probe_events()
    bundle = EventTable(**{k: getattr(ev, k) for k in ("sample", "channel", "group", "amplitude_uv",
                                                        "amplitude_sigma", "artefact", "rate_hz", "n_samples",
                                                        "sigma_uv", "floor_sigma")})
    tab = unit_metrics_for_events(bundle, units, None, 4.0)
    assert list(tab) == list(COLUMNS) and described_columns(tab) == COLUMNS
    header = [ln for ln in write_unit_table_csv(tab, tmp_path / "u.csv").read_text().splitlines()
              if not ln.startswith("#")][0]
    assert header == ",".join(COLUMNS)
    with pytest.raises(RigsideError, match="event positions"):
        unit_metrics_table(ev.time_s, units, ev.duration_s, ev.amplitude_uv, ev.amplitude_sigma, ev.channel,
                           ev.sigma_uv, 4.0, None, event_positions=np.zeros((len(ev), 3)))


def test_export_manifest_lists_unit_positions_on_a_probe_only(tmp_path):
    from rigside.core.exports.units import export_sorting
    from rigside.core.units.sorting import Sorting, SortingData, Unit

    ev, units = probe_events()
    data = SortingData.from_events(ev, np.zeros((len(ev), 1), np.float32), ["f0"])
    sorting = Sorting(data, units, {1: Unit(0), 2: Unit(0)}, next_id=3)
    export_sorting(ev, sorting, tmp_path / "probe")
    listed = json.loads((tmp_path / "probe" / "export.json").read_text())["units"]
    assert [(e["unit"], e["y_um"]) for e in listed] == [
        (u, round(float(np.median(ev.y_um[units == u])), 2)) for u in (1, 2)]
    bundle = ev.subset(np.ones(len(ev), bool))
    bundle.x_um = bundle.y_um = None
    export_sorting(bundle, sorting, tmp_path / "bundle")
    listed = json.loads((tmp_path / "bundle" / "export.json").read_text())["units"]
    assert all("x_um" not in e and "y_um" not in e for e in listed)
