"""Labels in session files: stored by name from format 2; format-1 files (label codes) still open."""

from pathlib import Path

import h5py
import pytest

from rigside.core.errors import SessionError
from rigside.core.io.h5safe import read_verified
from rigside.core.units.history import replay_matches
from rigside.core.units.session import load_session, save_session
from rigside.core.units.session_labels import FORMAT1_LABELS, upgrade_format1_journal
from rigside.core.units.sorting import LABELS

ROOT = Path(__file__).resolve().parents[2]
FORMAT1 = ROOT / "tests" / "fixtures" / "session_v1_labels.h5"
"""Written by the format-1 code from the demo: relabels to single unit (1), multi-unit (2, 5),
reject (3, 4), a note on 3, and a relabel of 6 to reject undone, redone and undone again."""
DEMO = ROOT / "sample_data" / "demo.bin"
EXPECTED = {1: "single unit", 2: "multi-unit", 3: "not neural", 4: "not neural", 5: "multi-unit",
            **{u: "unreviewed" for u in range(6, 15)}}


def test_the_fixture_is_a_format_1_file_with_label_codes():
    with h5py.File(FORMAT1, "r") as f:
        assert f.attrs["format_version"] == 1 and "labels" not in f["sorting"]
        codes = dict(zip(f["sorting/unit_id"][()].tolist(), f["sorting/unit_label"][()].tolist()))
    assert FORMAT1_LABELS[codes[3]] == "reject" and FORMAT1_LABELS[codes[1]] == "single unit"


def test_a_format_1_session_opens_with_every_label_intact():
    s = load_session(FORMAT1, recording_path_override=DEMO)
    assert {u: rec.label for u, rec in s.sorting.units.items()} == EXPECTED
    assert s.sorting.unit(3).note == "line noise"
    texts = [e["text"] for e in s.sorting.journal.entries]
    assert texts[3] == "Label units 3, 4 as not neural" and s.sorting.journal.entries[3]["op"]["label"] == "not neural"
    assert texts[5:] == ["Label unit 6 as not neural"] * 4          # the step, its undo, redo and undo
    assert not any("reject" in t for t in texts)
    assert replay_matches(s.sorting)                 # the upgraded journal replays to the same labels


def test_a_format_1_session_saved_again_stores_labels_by_name(tmp_path):
    s = load_session(FORMAT1, recording_path_override=DEMO)
    p = save_session(tmp_path / "again.h5", s)
    with h5py.File(p, "r") as f:
        assert f.attrs["format_version"] == 3 and "unit_label" not in f["sorting"]
        assert bytes(f["sorting/labels"][()]).decode().count("not neural") == 2
    back = load_session(p, check_recording=False)
    assert {u: rec.label for u, rec in back.sorting.units.items()} == EXPECTED
    assert back.sorting.journal.entries == s.sorting.journal.entries


def test_labels_are_our_own_set_unreviewed_first():
    assert LABELS == ("unreviewed", "single unit", "multi-unit", "not neural")


def test_a_format_1_label_code_out_of_range_is_refused(tmp_path):
    p = tmp_path / "bad.h5"
    p.write_bytes(FORMAT1.read_bytes())
    with h5py.File(p, "r+") as f:
        f["sorting/unit_label"][0] = 4
        f.attrs["checksum"] = read_verified(f, p)[1]
    with pytest.raises(SessionError, match="unit label codes must be below 4, got 4"):
        load_session(p, check_recording=False)


def test_journal_entries_without_renamed_labels_are_left_alone():
    entries = [{"seq": 0, "action": "do", "text": "Label unit 1 as single unit",
                "op": {"op": "relabel", "units": [1], "label": "single unit"}},
               {"seq": 1, "action": "undo", "text": "Label unit 1 as single unit", "ref": 0}]
    assert upgrade_format1_journal(entries) == entries
