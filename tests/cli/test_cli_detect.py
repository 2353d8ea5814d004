import csv
import json
import subprocess
import sys

import numpy as np
import pytest

from rigside.cli.main import build_parser, main
from tests.core.helpers import gaussian


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    d = tmp_path_factory.mktemp("cli")
    assert main(["synth", str(d / "demo.bin"), "--seconds", "3", "--channels", "8", "--seed", "2", "--quiet"]) == 0
    return d


def test_detect_writes_csv_and_summary(demo, capsys):
    out, summ = demo / "ev.csv", demo / "s.json"
    assert main(["detect", str(demo / "demo.bin"), "--out", str(out), "--summary", str(summ), "--quiet"]) == 0
    rows = list(csv.DictReader(open(out)))
    assert rows and {"sample", "time_s", "channel", "amplitude_uv"} <= set(rows[0])
    assert float(rows[0]["time_s"]) == pytest.approx(int(rows[0]["sample"]) / 30000, abs=1e-6)
    doc = json.load(open(summ))
    assert doc["rate_hz"] == 30000 and doc["duration_s"] == pytest.approx(3.0)
    assert doc["parameters"]["detect"]["threshold_sigma"] == 4.5
    ch = doc["channels"]
    assert len(ch) == 8 and {"noise_uv", "threshold_uv", "events"} <= set(ch[0])
    assert sum(c["events"] for c in ch) == len(rows)
    assert ch[0]["threshold_uv"] == pytest.approx(4.5 * ch[0]["noise_uv"])


def test_detect_h5_options_and_toml(demo):
    (demo / "p.toml").write_text("[detect]\nthreshold_sigma = 6.0\npolarity = \"both\"\n")
    out = demo / "ev.h5"
    assert main(["detect", str(demo / "demo.bin"), "--out", str(out), "--params", str(demo / "p.toml"),
                 "--band", "400", "5000", "--dead-time-ms", "0.5", "--quiet"]) == 0
    from rigside.core.events import EventTable
    t = EventTable.read_h5(out)
    assert len(t) > 0 and t.polarity == "both" and np.all(t.amplitude_sigma >= 6.0)
    # options win over the file
    out2 = demo / "ev2.csv"
    assert main(["detect", str(demo / "demo.bin"), "--out", str(out2), "--params", str(demo / "p.toml"),
                 "--threshold", "8", "--quiet"]) == 0
    assert all(float(r["amplitude_sigma"]) >= 8 for r in csv.DictReader(open(out2)))


def test_raw_options_without_metadata(tmp_path):
    (gaussian(30000, 4, 10.0) * 10).astype(np.int16).tofile(tmp_path / "x.dat")
    assert main(["detect", str(tmp_path / "x.dat"), "--channels", "4", "--rate", "30000", "--gain-uv", "0.1",
                 "--group-size", "2", "--out", str(tmp_path / "e.csv"), "--quiet"]) == 0


@pytest.mark.parametrize("make,args,msg", [
    (None, ["--channels", "4", "--rate", "30000"], "must exist"),
    (b"", ["--channels", "4", "--rate", "30000"], "must not be empty"),
    (b"\x00" * 30, ["--channels", "4", "--rate", "30000"], "multiple of channels"),
    (b"\x00" * 8000, ["--channels", "4", "--rate", "30000", "--band", "300", "20000"], "below Nyquist"),
    (b"\x00" * 8000, ["--channels", "4", "--rate", "30000", "--threshold", "-3"], "threshold must be above 0"),
    (b"\x00" * 8000, ["--channels", "4", "--rate", "30000", "--dead-time-ms", "500"], "dead time"),
    (b"\x00" * 8000, ["--channels", "4", "--rate", "30000", "--dtype", "float32", "--group-size", "0"], "group size"),
    (b"\x00" * 8000, [], "metadata file"),
    (b"\x00" * 800, ["--channels", "4", "--rate", "30000"], "band-pass to settle"),
])
def test_bad_input_exit_2_with_message_and_nothing_written(tmp_path, capsys, make, args, msg):
    rec = tmp_path / "r.bin"
    if make is not None:
        rec.write_bytes(make)
    out = tmp_path / "out.csv"
    out.write_text("keep me")
    code = main(["detect", str(rec), "--out", str(out), "--quiet", *args])
    err = capsys.readouterr().err
    assert code == 2 and msg in err and "Traceback" not in err
    assert out.read_text() == "keep me"


def test_nan_in_float_recording(tmp_path, capsys):
    x = gaussian(30000, 2)
    x[20000, 1] = np.nan
    x.tofile(tmp_path / "f.bin")
    code = main(["detect", str(tmp_path / "f.bin"), "--channels", "2", "--rate", "30000", "--dtype", "float32",
                 "--out", str(tmp_path / "o.csv"), "--quiet"])
    assert code == 2 and "NaN or Inf" in capsys.readouterr().err
    assert not (tmp_path / "o.csv").exists()


def test_refuses_to_overwrite_the_recording(demo, capsys):
    raw = demo / "demo.bin"
    before = raw.read_bytes()[:1000]
    copy = demo / "demo.csv"
    copy.write_bytes(b"")
    code = main(["detect", str(raw), "--out", str(raw), "--quiet"])
    assert code == 2 and "must end in .csv" in capsys.readouterr().err
    assert raw.read_bytes()[:1000] == before


def test_wrong_output_suffix_and_missing_folder(demo, capsys):
    assert main(["detect", str(demo / "demo.bin"), "--out", str(demo / "x.txt"), "--quiet"]) == 2
    assert main(["detect", str(demo / "demo.bin"), "--out", str(demo / "nope" / "x.csv"), "--quiet"]) == 2
    assert "output folder must exist" in capsys.readouterr().err


def test_synth_nonsense_options(tmp_path, capsys):
    assert main(["synth", str(tmp_path / "x.bin"), "--seconds", "-1"]) == 2
    assert main(["synth", str(tmp_path / "x.bin"), "--channels", "0"]) == 2
    assert "channel count" in capsys.readouterr().err
    assert not (tmp_path / "x.bin").exists()


def test_help_on_every_command():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    for name in sub.choices:
        r = subprocess.run([sys.executable, "-m", "rigside.cli.main", name, "--help"], capture_output=True, text=True)
        assert r.returncode == 0 and "usage: rigside" in r.stdout, name


def test_unknown_option_is_a_usage_error():
    r = subprocess.run([sys.executable, "-m", "rigside.cli.main", "detect", "x", "--out", "y.csv", "--frobnicate"],
                       capture_output=True, text=True)
    assert r.returncode == 2 and "unrecognized arguments" in r.stderr
