import csv
import re

import h5py
import numpy as np
import pytest

from rigside.cli.main import main
from rigside.core.runs.sort import checkpoint_path
from rigside.core.units.session import load_session


@pytest.fixture(scope="module")
def sorted_demo(tmp_path_factory):
    d = tmp_path_factory.mktemp("sort")
    assert main(["synth", str(d / "r.bin"), "--seconds", "6", "--channels", "8", "--seed", "4", "--quiet"]) == 0
    assert main(["sort", str(d / "r.bin"), "--session", str(d / "s.h5"), "--quiet"]) == 0
    return d


def test_sort_writes_a_session_with_units(sorted_demo):
    s = load_session(sorted_demo / "s.h5")
    assert len(s.events) > 100 and len(s.sorting.units) >= 2
    assert all(u.label == "unreviewed" for u in s.sorting.units.values())
    assert not checkpoint_path(sorted_demo / "s.h5").exists()


def test_export_writes_times_per_unit_and_binned_matrix(sorted_demo):
    out = sorted_demo / "exp"
    assert main(["export", str(sorted_demo / "s.h5"), "--out", str(out), "--quiet"]) == 0
    rows = list(csv.DictReader(open(out / "unit_times.csv")))
    assert set(rows[0]) == {"unit", "label", "time_s"}
    s = load_session(sorted_demo / "s.h5")
    for u in s.sorting.units:
        t = np.load(out / f"unit_{u}.npy", allow_pickle=False)
        assert len(t) == int(np.sum(s.sorting.assignments == u))
        assert np.array_equal(t, np.sort(t))
    with h5py.File(out / "binned.h5", "r") as f:
        ds = next(f[k] for k in f if isinstance(f[k], h5py.Dataset) and f[k].ndim == 2)
        assert 6000 in ds.shape  # 6 s in 1 ms bins (common practice, no source: 1 ms bins)


def test_metrics_table_has_one_row_per_unit(sorted_demo):
    out = sorted_demo / "m.csv"
    assert main(["metrics", str(sorted_demo / "s.h5"), "--out", str(out), "--quiet"]) == 0
    lines = [line for line in open(out) if not line.startswith("#")]
    rows = list(csv.DictReader(lines))
    s = load_session(sorted_demo / "s.h5")
    assert len(rows) == len(s.sorting.units)
    assert {"unit", "n_events", "rate_hz", "isi_violations", "contamination", "isolation_distance",
            "l_ratio", "snr", "missed_fraction", "presence_ratio", "label"} <= set(rows[0])
    assert "estimates" in open(out).read(400)


def test_resume_reuses_the_checkpoint(sorted_demo, monkeypatch):
    d = sorted_demo
    import rigside.core.runs.sort as sr

    def broken_first_pass(*a, **k):
        raise KeyboardInterrupt
    monkeypatch.setattr(sr, "first_pass", broken_first_pass)
    assert main(["sort", str(d / "r.bin"), "--session", str(d / "again.h5"), "--quiet"]) == 130
    assert checkpoint_path(d / "again.h5").exists() and not (d / "again.h5").exists()
    monkeypatch.undo()
    monkeypatch.setattr(sr, "detect_with_features", lambda *a, **k: pytest.fail("detection must not run again"))
    monkeypatch.setattr(sr, "compute_features", lambda *a, **k: pytest.fail("features must not run again"))
    assert main(["sort", str(d / "r.bin"), "--session", str(d / "again.h5"), "--resume", "--quiet"]) == 0
    a, b = load_session(d / "again.h5"), load_session(d / "s.h5")
    np.testing.assert_array_equal(a.sorting.assignments, b.sorting.assignments)


def test_resume_of_an_events_only_checkpoint_computes_the_features(sorted_demo, monkeypatch):
    """A checkpoint written before detection and features shared one pass holds events only."""
    d = sorted_demo
    import rigside.core.runs.sort as sr
    real = sr._write_checkpoint
    monkeypatch.setattr(sr, "_write_checkpoint", lambda path, key, ev, feats, content: real(path, key, ev, None,
                                                                                           content))
    monkeypatch.setattr(sr, "first_pass", lambda *a, **k: (_ for _ in ()).throw(KeyboardInterrupt()))
    assert main(["sort", str(d / "r.bin"), "--session", str(d / "old.h5"), "--quiet"]) == 130
    monkeypatch.undo()
    calls = []
    real_features = sr.compute_features
    monkeypatch.setattr(sr, "detect_with_features", lambda *a, **k: pytest.fail("detection must not run again"))
    monkeypatch.setattr(sr, "compute_features", lambda *a, **k: calls.append(1) or real_features(*a, **k))
    assert main(["sort", str(d / "r.bin"), "--session", str(d / "old.h5"), "--resume", "--quiet"]) == 0
    assert calls == [1]
    a, b = load_session(d / "old.h5"), load_session(d / "s.h5")
    np.testing.assert_array_equal(a.events.sample, b.events.sample)


def test_resume_ignores_a_checkpoint_of_other_parameters(sorted_demo, monkeypatch):
    d = sorted_demo
    import rigside.core.runs.sort as sr
    monkeypatch.setattr(sr, "first_pass", lambda *a, **k: (_ for _ in ()).throw(KeyboardInterrupt()))
    assert main(["sort", str(d / "r.bin"), "--session", str(d / "p.h5"), "--quiet"]) == 130
    monkeypatch.undo()
    assert main(["sort", str(d / "r.bin"), "--session", str(d / "p.h5"), "--threshold", "6",
                 "--resume", "--quiet"]) == 0
    assert np.all(load_session(d / "p.h5").events.amplitude_sigma >= 6)


@pytest.mark.parametrize("args,msg", [
    (["sort", "{d}/r.bin", "--session", "{d}/x.txt"], "must end in .h5"),
    (["sort", "{d}/r.bin", "--session", "{d}/x.h5", "--clusters", "0"], "forced cluster count"),
    (["sort", "{d}/missing.bin", "--session", "{d}/x.h5"], "must exist"),
    (["export", "{d}/r.bin", "--out", "{d}/e2"], "session"),
    (["export", "{d}/s.h5", "--out", "{d}/r.bin"], "must be a folder"),
    (["metrics", "{d}/nothing.h5", "--out", "{d}/m2.csv"], "session"),
    (["metrics", "{d}/s.h5", "--out", "{d}/m2.csv", "--refractory-ms", "-1"], "refractory period"),
])
def test_bad_input(sorted_demo, capsys, args, msg):
    code = main([a.format(d=sorted_demo) for a in args] + ["--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and msg in err and "Traceback" not in err


def test_export_help_names_exactly_the_files_written(sorted_demo, capsys):
    out = sorted_demo / "exp_help"
    assert main(["export", str(sorted_demo / "s.h5"), "--out", str(out), "--quiet"]) == 0
    written = {re.sub(r"^unit_\d+\.npy$", "unit_<id>.npy", p.name) for p in out.iterdir()}
    capsys.readouterr()
    with pytest.raises(SystemExit):
        main(["export", "--help"])
    description = capsys.readouterr().out.split("positional arguments:")[0].split("\n\n", 1)[1]  # not usage, options
    named = set(re.findall(r"[\w<>]+\.(?:csv|npy|h5|json)", " ".join(description.split())))
    assert named == written == {"unit_times.csv", "unit_<id>.npy", "binned.h5", "export.json"}
