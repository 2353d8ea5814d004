"""An export folder is consistent as a whole (common practice, no source): no stale unit files after
a re-export, an interrupted export is marked incomplete, files that are not ours are left alone."""

import json

import pytest

from rigside.core.errors import RigsideError
from rigside.core.exports.units import export_sorting
from rigside.core.io.atomic import protect_inputs, stale_temporaries
from rigside.core.progress import Cancelled

from .test_export import small_sorting


def manifest(folder):
    return json.loads((folder / "export.json").read_text())


def test_re_export_removes_unit_files_of_the_earlier_export(tmp_path):
    ev, s = small_sorting()
    out = tmp_path / "x"
    export_sorting(ev, s, out)
    (out / "notes.txt").write_text("the user's own file")
    export_sorting(ev, s, out, labels=["single unit"])
    assert sorted(p.name for p in out.glob("unit_*.npy")) == ["unit_1.npy"]
    assert (out / "notes.txt").read_text() == "the user's own file"
    m = manifest(out)
    assert m["complete"] is True and set(m["files"]) == {"unit_1.npy", "unit_times.csv", "binned.h5"}
    assert all(m["files"][n] == (out / n).stat().st_size for n in m["files"])


def test_an_interrupted_export_is_marked_incomplete_and_cleaned_by_the_next(tmp_path):
    ev, s = small_sorting()
    out = tmp_path / "x"
    export_sorting(ev, s, out)
    calls = []

    def cancel_after_first_unit() -> bool:
        calls.append(1)
        return len(calls) > 1
    with pytest.raises(Cancelled):
        export_sorting(ev, s, out, labels=["single unit", "not neural"], cancel=cancel_after_first_unit)
    m = manifest(out)
    assert m["complete"] is False                            # does not look like a finished export
    assert {"unit_1.npy", "unit_3.npy"} <= set(m["files"])
    assert not (out / "unit_2.npy").exists()                  # the earlier export's extra unit is gone
    assert not stale_temporaries(out / "unit_3.npy")
    export_sorting(ev, s, out, labels=["multi-unit"])
    assert sorted(p.name for p in out.glob("unit_*.npy")) == ["unit_2.npy"]
    assert manifest(out)["complete"] is True


def test_a_hostile_manifest_cannot_make_the_export_delete_outside_its_folder(tmp_path):
    ev, s = small_sorting()
    out = tmp_path / "x"
    out.mkdir()
    victim = tmp_path / "keep.txt"
    victim.write_text("precious")
    (out / "export.json").write_text(json.dumps({"files": ["../keep.txt", str(victim)],
                                                 "units": [{"file": "../keep.txt"}]}))
    export_sorting(ev, s, out)
    assert victim.read_text() == "precious"


def test_export_refuses_before_writing_when_a_planned_file_is_an_input(tmp_path):
    ev, s = small_sorting()
    out = tmp_path / "x"
    out.mkdir()
    (out / "unit_2.npy").write_bytes(b"an input")
    with protect_inputs([out / "unit_2.npy"]):
        with pytest.raises(RigsideError, match="must not be one of the inputs"):
            export_sorting(ev, s, out)
    assert (out / "unit_2.npy").read_bytes() == b"an input"
    assert sorted(p.name for p in out.iterdir()) == ["unit_2.npy"]
