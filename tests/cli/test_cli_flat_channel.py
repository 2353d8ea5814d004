"""A flat (constant) channel takes no part in detection or sorting and is named in the summaries."""

import json
import shutil

import numpy as np
import pytest

from rigside.cli.main import main
from rigside.core.units.session import load_session


@pytest.fixture(scope="module")
def flat(tmp_path_factory):
    """The demo recording with channel 2 held at a DC offset, and one with group 2 (ch 4-7) flat."""
    d = tmp_path_factory.mktemp("flat")
    assert main(["synth", str(d / "demo.bin"), "--seconds", "4", "--channels", "8", "--seed", "3", "--quiet"]) == 0
    x = np.fromfile(d / "demo.bin", dtype=np.int16).reshape(-1, 8)
    for name, cols in (("one", [2]), ("group", [4, 5, 6, 7])):
        y = x.copy()
        y[:, cols] = 37  # all samples equal: a dead wire with a DC offset
        y.tofile(d / f"{name}.bin")
        shutil.copy(d / "demo.rigside.toml", d / f"{name}.rigside.toml")
    return d


def test_detect_leaves_the_flat_channel_out_and_lists_it(flat, capsys):
    out, summ = flat / "one.csv", flat / "one.json"
    assert main(["detect", str(flat / "one.bin"), "--out", str(out), "--summary", str(summ), "--quiet"]) == 0
    channels = np.loadtxt(out, delimiter=",", skiprows=1, usecols=2, dtype=int)
    assert len(channels) > 50 and 2 not in set(channels.tolist())
    doc = json.load(open(summ))
    assert doc["excluded_channels"] == [{"channel": 2, "flag": "dead"}]
    assert doc["channels"][2]["events"] == 0 and doc["channels"][2]["excluded"]
    assert doc["skipped_groups"] == []
    printed = capsys.readouterr().out
    assert "dead channel(s) 2 left out" in printed


def test_sort_makes_no_unit_from_the_flat_channel(flat, capsys):
    assert main(["sort", str(flat / "one.bin"), "--session", str(flat / "one.h5"), "--quiet"]) == 0
    s = load_session(flat / "one.h5")
    assert s.events.excluded == {2: "dead"}
    assert len(s.events) > 50 and not np.any(s.events.channel == 2)
    assert np.all(s.events.amplitude_sigma < 1e4)  # no event measured against a ~0 noise
    assert "dead channel(s) 2 left out" in capsys.readouterr().out


def test_a_group_with_no_usable_channel_is_skipped_with_a_note(flat, capsys):
    summ = flat / "group.json"
    assert main(["detect", str(flat / "group.bin"), "--out", str(flat / "group.csv"),
                 "--summary", str(summ), "--quiet"]) == 0
    doc = json.load(open(summ))
    assert [g["group"] for g in doc["skipped_groups"]] == [1]
    assert sum(c["events"] for c in doc["channels"][4:]) == 0
    assert sum(c["events"] for c in doc["channels"][:4]) > 20
    assert "bundle B skipped: no usable channel" in capsys.readouterr().out


def test_detect_says_why_its_count_differs_from_sort(flat, capsys):
    assert main(["detect", str(flat / "demo.bin"), "--out", str(flat / "d.csv"), "--quiet"]) == 0
    detect_line = capsys.readouterr().out
    assert main(["sort", str(flat / "demo.bin"), "--session", str(flat / "d.h5"), "--quiet"]) == 0
    sort_line = capsys.readouterr().out
    s = load_session(flat / "d.h5")
    n_art = int(s.events.artefact.sum())
    n_detect = int(detect_line.split()[0].replace(",", ""))
    n_found = int(s.events.recovered.sum())          # events the overlap pass of sort recovered
    assert n_art > 0 and n_detect + n_art + n_found == len(s.events)
    assert f"({n_found:,} recovered from overlaps)" in sort_line
    assert f"({n_art:,} artefacts left out; --keep-artefacts writes them)" in detect_line
    assert f"{len(s.events):,} events ({n_art:,} artefacts kept for sorting, in no unit)" in sort_line
