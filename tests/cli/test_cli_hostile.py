"""Hostile inputs on the command line: exit code 2, one line on stderr, nothing written."""

import shutil

import h5py
import numpy as np
import pytest

from rigside.cli.main import main
from rigside.core.runs.sort import checkpoint_path


@pytest.fixture(scope="module")
def sorted_small(tmp_path_factory):
    d = tmp_path_factory.mktemp("hostile")
    assert main(["synth", str(d / "r.bin"), "--seconds", "3", "--channels", "8", "--seed", "5", "--quiet"]) == 0
    assert main(["sort", str(d / "r.bin"), "--session", str(d / "s.h5"), "--quiet"]) == 0
    return d


def one_line_error(capsys, argv, message):
    code = main([str(a) for a in argv] + ["--quiet"])
    err = capsys.readouterr().err
    assert code == 2, err
    assert message in err and "Traceback" not in err and len(err.strip().splitlines()) == 1, err


def test_export_refuses_bins_that_would_not_fit(sorted_small, capsys):
    out = sorted_small / "exp"
    one_line_error(capsys, ["export", sorted_small / "s.h5", "--out", out, "--bin-ms", "1e-7"],
                   "bin width must give at most")
    assert not out.exists()


def test_resume_refuses_a_hostile_checkpoint(sorted_small, capsys, monkeypatch):
    d = sorted_small
    import rigside.core.runs.sort as sr
    monkeypatch.setattr(sr, "first_pass", lambda *a, **k: (_ for _ in ()).throw(KeyboardInterrupt()))
    assert main(["sort", str(d / "r.bin"), "--session", str(d / "c.h5"), "--quiet"]) == 130
    capsys.readouterr()
    monkeypatch.undo()
    ckpt = checkpoint_path(d / "c.h5")
    good = d / "good.checkpoint"
    shutil.copy(ckpt, good)
    cases = [
        ("events/group", lambda g: np.full_like(g, 7), "event groups must be the recording's channel groups"),
        ("events/channel", lambda c: np.full_like(c, 500), "valid channels"),
        ("features", lambda v: np.full_like(v, np.nan), "features must be finite"),
    ]
    for name, change, message in cases:
        shutil.copy(good, ckpt)
        with h5py.File(ckpt, "r+") as f:
            new = change(f[name][()])
            del f[name]
            f[name] = new
        one_line_error(capsys, ["sort", d / "r.bin", "--session", d / "c.h5", "--resume"], message)
        assert not (d / "c.h5").exists()
    with h5py.File(ckpt, "r+") as f:           # a declared shape with nothing stored behind it
        del f["features"]
        f.create_dataset("features", shape=(10**10, 6), dtype="f4", chunks=(4096, 6))
    one_line_error(capsys, ["sort", d / "r.bin", "--session", d / "c.h5", "--resume"], "must fit the file's size")


@pytest.mark.parametrize("toml, message", [
    ("[run]\nworkers = true\n", "worker count must be an integer from 1 to 64, got True"),
    ("[noise]\nwindow_s = 1e9\n", "noise window length must be above 0 and at most 10 s"),
    ("[run]\nworkers = " + "[" * 50_000 + "]" * 50_000 + "\n", "nested at most 32 levels"),
    ("[run]\nchunk_s = 60.0\nworkers = 64\n", "chunk length x worker count must keep detection buffers"),
], ids=["workers-bool", "huge-window", "deep", "memory"])
def test_detect_refuses_loose_or_hostile_parameters(sorted_small, capsys, tmp_path, toml, message):
    (tmp_path / "p.toml").write_text(toml)
    out = tmp_path / "ev.csv"
    one_line_error(capsys, ["detect", sorted_small / "r.bin", "--out", out, "--params", tmp_path / "p.toml"], message)
    assert not out.exists()


def test_detect_refuses_a_newer_metadata_schema(capsys, tmp_path):
    np.zeros((3000, 2), np.int16).tofile(tmp_path / "r.bin")
    (tmp_path / "r.rigside.toml").write_text("[recording]\nschema = 99\nchannels = 2\nrate_hz = 30000\n")
    one_line_error(capsys, ["detect", tmp_path / "r.bin", "--out", tmp_path / "ev.csv"], "schema must be 1, got 99")


def test_detect_refuses_an_hdf5_recording_that_stores_nothing(capsys, tmp_path):
    with h5py.File(tmp_path / "huge.h5", "w") as f:
        f.create_dataset("data", shape=(10**12, 8), dtype="f4", chunks=(4096, 8)).attrs["rate_hz"] = 30000.0
    one_line_error(capsys, ["detect", tmp_path / "huge.h5", "--out", tmp_path / "ev.csv"], "must store the")
    assert not (tmp_path / "ev.csv").exists()


def test_external_storage_needs_the_option(capsys, tmp_path):
    raw = tmp_path / "samples.raw"
    (np.random.default_rng(1).normal(0, 30, (30000, 2))).astype("<f4").tofile(raw)
    with h5py.File(tmp_path / "ext.h5", "w") as f:
        f.create_dataset("data", shape=(30000, 2), dtype="<f4",
                         external=[(str(raw), 0, 30000 * 8)]).attrs["rate_hz"] = 30000.0
    one_line_error(capsys, ["detect", tmp_path / "ext.h5", "--out", tmp_path / "ev.csv"], "--allow-external")
    assert main(["detect", str(tmp_path / "ext.h5"), "--out", str(tmp_path / "ev.csv"), "--allow-external",
                 "--quiet"]) == 0
