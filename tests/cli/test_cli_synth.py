"""`rigside synth`: options, settings files, the demo's bytes, and bad input (invented data)."""

from __future__ import annotations

import numpy as np

from rigside.cli.main import main
from rigside.core.io.atomic import stale_temporaries
from rigside.core.synthetic.settings import SynthSettings
from rigside.core.synthetic.truth import load_truth
from rigside.sample_data import demo_path
from tests.cli.test_cli_failing_writes import LIMITED, assert_one_line, needs_resource, run_child

QUIET = ["--quiet"]


def test_default_options_reproduce_the_bundled_demo(tmp_path):
    assert main(["synth", str(tmp_path / "demo.bin"), "--seconds", "4", "--seed", "0", *QUIET]) == 0
    for name in ("demo.bin", "demo.truth.csv", "demo.truth_units.csv"):
        assert (tmp_path / name).read_bytes() == (demo_path().parent / name).read_bytes(), name


def test_options_and_a_settings_file_give_the_same_bytes(tmp_path):
    opts = ["--seconds", "2", "--channels", "8", "--units", "4", "--snr", "5", "10", "--rates", "3", "30",
            "--noise-uv", "8", "--noise-colour", "white", "--hum-uv", "0", "--overlap-fraction", "0.1",
            "--seed", "7"]
    assert main(["synth", str(tmp_path / "a.bin"), *opts, *QUIET]) == 0
    settings = SynthSettings.load(tmp_path / "a.synth.toml")
    assert (settings.units, settings.snr, settings.rates_hz, settings.noise_colour) == (4, (5.0, 10.0), (3.0, 30.0),
                                                                                       "white")
    assert main(["synth", str(tmp_path / "b.bin"), "--settings", str(tmp_path / "a.synth.toml"), *QUIET]) == 0
    for suffix in (".bin", ".truth.csv", ".truth_units.csv", ".synth.toml"):
        assert (tmp_path / f"a{suffix}").read_bytes() == (tmp_path / f"b{suffix}").read_bytes(), suffix
    # an option given beside the file wins over it
    assert main(["synth", str(tmp_path / "c.bin"), "--settings", str(tmp_path / "a.synth.toml"), "--seed", "8",
                 *QUIET]) == 0
    assert SynthSettings.load(tmp_path / "c.synth.toml").seed == 8
    assert (tmp_path / "c.bin").read_bytes() != (tmp_path / "a.bin").read_bytes()


def test_zero_units_give_noise_only(tmp_path):
    assert main(["synth", str(tmp_path / "n.bin"), "--seconds", "1", "--units", "0", *QUIET]) == 0
    truth = load_truth(tmp_path / "n.truth.csv")
    assert len(truth.sample) == 0 and truth.unit_group == {}
    assert np.fromfile(tmp_path / "n.bin", "<i2").size == 30000 * 16


def test_bad_settings_are_one_line_and_write_nothing(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text("[practice_recording]\nunits = -3\n", encoding="utf-8")
    cases = [["--settings", str(bad)], ["--settings", str(tmp_path / "missing.toml")], ["--snr", "9", "3"],
             ["--rates", "0", "5"], ["--noise-uv", "-1"], ["--seconds", "1e9"], ["--overlap-fraction", "2"]]
    for extra in cases:
        assert main(["synth", str(tmp_path / "x.bin"), *extra, *QUIET]) == 2, extra
        err = capsys.readouterr().err
        assert err.startswith("rigside synth: error:") and err.count("\n") == 1, err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.toml"]


def test_the_settings_file_given_is_never_replaced(tmp_path, capsys):
    assert main(["synth", str(tmp_path / "a.bin"), "--seconds", "1", *QUIET]) == 0
    before = (tmp_path / "a.synth.toml").read_bytes()
    assert main(["synth", str(tmp_path / "a.bin"), "--settings", str(tmp_path / "a.synth.toml"), "--seed", "3",
                 "--overwrite", *QUIET]) == 2
    assert "must not be one of the inputs" in capsys.readouterr().err
    assert (tmp_path / "a.synth.toml").read_bytes() == before


@needs_resource
def test_a_full_disk_while_writing_is_one_line_and_leaves_no_file(tmp_path):
    # the file size limit stands in for a full disk (common practice, no source)
    proc = run_child(LIMITED, 200_000, "synth", tmp_path / "big.bin", "--seconds", "5", "--quiet")
    assert_one_line(proc, "rigside synth: error:")
    assert list(tmp_path.iterdir()) == [] and not stale_temporaries(tmp_path / "big.bin")
