"""The per-unit quality table: rows agree with the single metrics, CSV output, limit flags."""

import csv
import math

import numpy as np
import pytest
from scipy import optimize, stats

from rigside.core.errors import ParamError, RigsideError
from rigside.core.events import EventTable
from rigside.core.progress import Cancelled
from rigside.core.quality.unit_table import (
    CAUTION,
    COLUMNS,
    MetricParams,
    main_channel,
    unit_metrics_for_events,
    unit_metrics_table,
)
from rigside.core.quality.unit_table_io import (
    DEFAULT_LIMITS,
    Limit,
    flag_units,
    quality_flag_text,
    undefined_units,
    write_unit_table_csv,
)
from rigside.core.signal.features import Features
from rigside.core.units.sorting import NO_UNIT

from .test_metrics import hill
from .test_separation import reference

DURATION = 200.0
SIGMA = np.full(8, 10.0)
THRESHOLD = 4.5


def make_data(seed=0):
    """Invented ground truth: units 1 and 2 in group 0 (1 far from the rest, 2 overlapping the
    events in no unit), unit 3 with two spikes in group 1, events in no unit in both groups."""
    rng = np.random.default_rng(seed)
    spec = [  # unit, group, channel, count, feature centre
        (1, 0, 1, 2000, 8.0), (2, 0, 2, 1500, 0.5), (3, 1, 5, 2, 0.0),
        (NO_UNIT, 0, 0, 1500, 0.0), (NO_UNIT, 1, 6, 300, 0.0)]
    cols = {k: [] for k in ("t", "u", "g", "c", "a", "f")}
    for unit, group, chan, n, centre in spec:
        t = np.cumsum(0.002 + rng.exponential(DURATION / n, n))
        t = t[t < DURATION]
        cols["t"].append(t)
        cols["u"].append(np.full(len(t), unit))
        cols["g"].append(np.full(len(t), group))
        cols["c"].append(np.full(len(t), chan))
        amp = rng.normal(100.0, 20.0, len(t))
        cols["a"].append(-np.maximum(amp, THRESHOLD * 10.0 + rng.uniform(0, 5, len(t))))
        cols["f"].append(rng.normal(centre, 1.0, (len(t), 3)))
    order = np.argsort(np.concatenate(cols["t"]), kind="stable")
    out = {k: np.concatenate(v)[order] for k, v in cols.items()}
    out["s"] = np.abs(out["a"]) / SIGMA[out["c"]]
    return out


def table_of(d, **kw):
    return unit_metrics_table(d["t"], d["u"], DURATION, d["a"], d["s"], d["c"], SIGMA, THRESHOLD,
                              d["f"], d["g"], **kw)


def truncated_fit_missed(x, theta):
    """Missed fraction by maximising the scipy.stats.truncnorm log-likelihood numerically
    (scipy.optimize), after Hill et al. 2011 [memory]: Phi((theta - mu) / sd)."""
    def nll(p):
        sd = math.exp(p[1])
        return -stats.truncnorm.logpdf(x, (theta - p[0]) / sd, np.inf, loc=p[0], scale=sd).sum()
    fit = optimize.minimize(nll, [x.mean(), math.log(x.std())], method="Nelder-Mead",
                            options={"xatol": 1e-8, "fatol": 1e-10, "maxiter": 5000})
    return stats.norm.cdf((theta - fit.x[0]) / math.exp(fit.x[1]))


def test_rows_agree_with_outside_references():
    d = make_data()
    tab = table_of(d)
    assert set(tab) == set(COLUMNS)
    assert list(tab["unit"]) == [1, 2, 3]                  # sorted, no row for NO_UNIT
    for i, u in enumerate(tab["unit"]):
        mine = d["u"] == u
        in_group = d["g"] == tab["group"][i]
        n = int(mine.sum())
        assert tab["n_events"][i] == n and tab["rate_hz"][i] == pytest.approx(n / DURATION)
        # brute force: intervals shorter than the 1.5 ms refractory period, and the Hill et al.
        # 2011 closed form [memory] (written out in test_metrics.hill)
        r = int(np.sum(np.diff(d["t"][mine]) < 0.0015))
        assert tab["isi_violations"][i] == r
        if n >= 2:
            assert tab["contamination"][i] == pytest.approx(hill(r, n, DURATION, 0.0015, 0.0), abs=1e-12)
        # reference implementation: scipy cdist Mahalanobis + scipy.stats.chi2.sf
        if n > 3:
            iso, lr = reference(d["f"][in_group], mine[in_group])
            assert tab["isolation_distance"][i] == pytest.approx(iso, rel=1e-9)
            assert tab["l_ratio"][i] == pytest.approx(lr, rel=1e-9)
        # main channel: the channel holding most of the unit's events (common practice, no source)
        ch = tab["main_channel"][i]
        assert ch == np.bincount(d["c"][mine]).argmax()
        on_main = mine & (d["c"] == ch)
        # SNR: mean |peak| over the channel's sigma (common practice, no source)
        assert tab["snr"][i] == pytest.approx(np.abs(d["a"][on_main]).mean() / SIGMA[ch], rel=1e-9)
        if on_main.sum() >= 20:
            assert tab["missed_fraction"][i] == pytest.approx(
                truncated_fit_missed(d["s"][on_main].astype(np.float64), THRESHOLD), abs=1e-4)
    # ground truth of the invented data: unit 1 far, unit 2 overlapping, unit 3 too small
    assert tab["isolation_distance"][0] > 50 > tab["isolation_distance"][1]
    assert tab["l_ratio"][0] < 0.01 < tab["l_ratio"][1]
    assert tab["isi_violations"][0] == 0 and tab["contamination"][0] == 0
    assert math.isnan(tab["isolation_distance"][2]) and tab["isolation_distance_reason"][2]
    assert tab["n_events"][2] == 2 and tab["contamination"][2] == 0.0
    assert math.isnan(tab["cv_isi"][2]) and "at least 3 spikes" in tab["cv_isi_reason"][2]
    assert "at least 20 events" in tab["missed_fraction_reason"][2]
    assert tab["presence_ratio"][0] == 1.0


def test_one_unit_refresh_equals_full_table():
    d = make_data(1)
    full = table_of(d)
    one = table_of(d, only_units=[2])
    assert list(one["unit"]) == [2]
    for c in COLUMNS:
        assert np.array_equal(one[c], full[c][1:2], equal_nan=one[c].dtype.kind == "f"), c
    with pytest.raises(RigsideError, match="must have events"):
        table_of(d, only_units=[99])
    with pytest.raises(RigsideError, match="in no unit"):
        table_of(d, only_units=[NO_UNIT])


def test_unit_spread_over_groups_uses_its_main_group():
    d = make_data(2)
    moved = np.flatnonzero(d["u"] == 2)[:10]
    d["g"][moved] = 1
    tab = table_of(d)
    assert tab["group"][1] == 0
    in_group = d["g"] == 0
    # reference implementation: scipy cdist Mahalanobis + scipy.stats.chi2.sf, on group 0 only
    assert tab["l_ratio"][1] == pytest.approx(reference(d["f"][in_group], (d["u"] == 2)[in_group])[1], rel=1e-9)


def test_without_features_and_empty():
    d = make_data()
    tab = unit_metrics_table(d["t"], d["u"], DURATION, d["a"], d["s"], d["c"], SIGMA, THRESHOLD, None)
    assert np.all(np.isnan(tab["isolation_distance"]))
    assert all(r == "no features were given" for r in tab["l_ratio_reason"])
    empty = unit_metrics_table([], np.array([], int), 10.0, [], [], np.array([], int), SIGMA, 4.0, None)
    assert all(len(v) == 0 for v in empty.values())
    assert empty["unit"].dtype == np.int64 and empty["rate_hz"].dtype == np.float64


def test_progress_and_cancel():
    d = make_data()
    seen = []
    table_of(d, progress=lambda f, m: seen.append(f))
    assert seen[-1] == 1.0 and len(seen) == 3
    with pytest.raises(Cancelled):
        table_of(d, cancel=lambda: True)


def test_bad_input():
    d = make_data()
    with pytest.raises(RigsideError, match="one entry per event"):
        unit_metrics_table(d["t"], d["u"][:-1], DURATION, d["a"], d["s"], d["c"], SIGMA, 4.5, None)
    with pytest.raises(RigsideError, match="integer"):
        unit_metrics_table(d["t"], d["u"].astype(float), DURATION, d["a"], d["s"], d["c"], SIGMA, 4.5, None)
    with pytest.raises(RigsideError, match="event channels must lie"):
        unit_metrics_table(d["t"], d["u"], DURATION, d["a"], d["s"], d["c"] + 5, SIGMA, 4.5, None)
    with pytest.raises(RigsideError, match="sorted"):
        unit_metrics_table(d["t"][::-1], d["u"], DURATION, d["a"], d["s"], d["c"], SIGMA, 4.5, None)
    with pytest.raises(ParamError, match="threshold"):
        unit_metrics_table(d["t"], d["u"], DURATION, d["a"], d["s"], d["c"], SIGMA, [4.5, 4.5], None)
    bad = d["f"].copy()
    bad[3, 1] = np.nan
    with pytest.raises(RigsideError, match="features must hold finite"):
        unit_metrics_table(d["t"], d["u"], DURATION, d["a"], d["s"], d["c"], SIGMA, 4.5, bad)
    amp = d["a"].copy()
    amp[0] = np.nan
    with pytest.raises(RigsideError, match="amplitudes"):
        unit_metrics_table(d["t"], d["u"], DURATION, amp, d["s"], d["c"], SIGMA, 4.5, None)
    with pytest.raises(ParamError, match="censored period"):
        table_of(d, params=MetricParams(refractory_ms=1.0, censored_ms=1.0))


def test_csv_is_written_atomically_with_header(tmp_path):
    d = make_data()
    tab = table_of(d)
    path = write_unit_table_csv(tab, tmp_path / "units.csv", MetricParams(refractory_ms=2.0))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["units.csv"]   # no temporary file left
    lines = path.read_text().splitlines()
    comments = [ln for ln in lines if ln.startswith("#")]
    assert CAUTION in comments[1] and "refractory_ms = 2" in comments[2]
    assert "# rate_hz: mean firing rate over the recording [Hz]" in comments
    rows = list(csv.DictReader(ln for ln in lines if not ln.startswith("#")))
    assert [int(r["unit"]) for r in rows] == [1, 2, 3]
    assert float(rows[0]["isolation_distance"]) == pytest.approx(tab["isolation_distance"][0], rel=1e-5)
    assert rows[2]["isolation_distance"] == "nan"
    assert rows[2]["isolation_distance_reason"] == tab["isolation_distance_reason"][2]
    with pytest.raises(RigsideError, match="every column"):
        write_unit_table_csv({"unit": tab["unit"]}, tmp_path / "bad.csv")
    assert not (tmp_path / "bad.csv").exists()


def test_flags_against_limits():
    tab = {c: np.array([0.02, 0.25, math.nan]) for c in COLUMNS if c not in ("unit",)}
    tab["unit"] = np.array([1, 2, 3])
    limits = [Limit("contamination", "max", 0.10), Limit("presence_ratio", "min", 0.1)]
    flags = flag_units(tab, limits)
    assert list(flags["contamination > 0.1"]) == [False, True, False]   # undefined is no breach
    assert list(flags["presence_ratio < 0.1"]) == [True, False, False]
    assert list(flags["any"]) == [True, True, False]
    assert {k: list(v) for k, v in undefined_units(tab, limits).items()} == {
        "contamination": [False, False, True], "presence_ratio": [False, False, True]}
    assert set(flag_units(tab)) == {lim.name for lim in DEFAULT_LIMITS} | {"any"}
    with pytest.raises(ParamError, match="limit kind"):
        Limit("contamination", "above", 0.1)
    with pytest.raises(ParamError, match="limit column"):
        Limit("contamination_reason", "max", 0.1)


def test_table_from_event_table_uses_principal_components():
    d = make_data(3)
    ev = EventTable(sample=np.round(d["t"] * 30000).astype(np.int64), channel=d["c"], group=d["g"],
                    amplitude_uv=d["a"], amplitude_sigma=d["s"], artefact=np.zeros(len(d["t"]), bool),
                    rate_hz=30000.0, n_samples=int(DURATION * 30000), sigma_uv=SIGMA,
                    floor_sigma=THRESHOLD)
    # a constant width column would make every covariance singular if it were used
    values = np.column_stack([d["f"], np.full(len(d["t"]), 0.4)]).astype(np.float32)
    feats = Features(values, ["PC1", "PC2", "PC3", "width_ms"])
    tab = unit_metrics_for_events(ev, d["u"], feats, THRESHOLD)
    in_group = d["g"] == 0
    # reference implementation (scipy cdist + chi2.sf) on the three PC columns only
    assert tab["isolation_distance"][0] == pytest.approx(
        reference(values[in_group, :3].astype(np.float64), (d["u"] == 1)[in_group])[0], rel=1e-6)
    with pytest.raises(RigsideError, match="principal components"):
        unit_metrics_for_events(ev, d["u"], Features(values[:, 3:], ["width_ms"]), THRESHOLD)


def test_undefined_numbers_are_their_own_state_in_the_flag_text():
    tab = {c: np.array([0.02, 0.25, math.nan]) for c in COLUMNS if not c.endswith("_reason") and c != "unit"}
    tab.update({c: np.array(["", "", "too few events"], dtype=object) for c in COLUMNS if c.endswith("_reason")})
    tab["unit"] = np.array([1, 2, 3])
    limits = [Limit("contamination", "max", 0.10), Limit("isolation_distance", "min", 20.0)]
    text = quality_flag_text(tab, limits)
    assert text[0] == "isolation_distance < 20"
    assert text[1] == "contamination > 0.1; isolation_distance < 20"
    assert text[2] == "contamination undefined: too few events; isolation_distance undefined: too few events"
    assert "<" not in text[2] and ">" not in text[2]


def test_main_channel_is_the_most_frequent_detection_channel():
    """The one main-channel rule (common practice, no source): the mode of the detection
    channels, the lowest channel on ties, checked against scipy.stats.mode."""
    rng = np.random.default_rng(3)
    for _ in range(20):
        ch = rng.integers(0, 6, size=int(rng.integers(1, 40)))
        assert main_channel(ch) == int(stats.mode(ch, keepdims=False).mode)
    assert main_channel(np.array([4, 2, 4, 2])) == 2
    with pytest.raises(RigsideError, match="needs events"):
        main_channel(np.array([], dtype=np.int64))
