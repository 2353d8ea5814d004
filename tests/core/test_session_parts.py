"""Format 3: the static part (events, features) is written once and shared by every later
state; checksums come from the arrays written; loading reads each dataset once; format 2
one-file sessions still open."""

import collections
import os

import h5py
import numpy as np
import pytest

from rigside.core.errors import SessionError
from rigside.core.io.h5safe import read_verified
from rigside.core.units.first_pass import first_pass
from rigside.core.units.history import UndoStack
from rigside.core.units.operations import SetNote
from rigside.core.units.session import (
    Session,
    autosave_path,
    backup_path,
    load_session,
    save_autosave,
    save_session,
    verify_session_file,
)

from .sorting_data import make_events
from .test_session import copy_session, flip_bit, made, reseal, static_of  # noqa: F401  (module fixture and helpers)


def _stamp(path):
    st = path.stat()
    return st.st_ino, st.st_mtime_ns, st.st_size


def test_later_saves_and_autosaves_write_only_the_state_part(made, tmp_path):  # noqa: F811
    raw, s = made
    p = save_session(tmp_path / "a.h5", copy_session(s))
    static = static_of(p)
    first = _stamp(static)
    back = load_session(p)
    u = back.sorting.unit_ids()[0]
    UndoStack(back.sorting).push(SetNote(u, "after load"))
    save_autosave(p, back)
    assert static_of(autosave_path(p)) == static
    save_session(p, back)
    fresh = copy_session(s)                # no checksum kept: built in memory, found on disk, not written
    save_session(p, fresh)
    assert _stamp(static) == first
    assert [q.name for q in tmp_path.glob("a.h5.static-*")] == [static.name]
    assert load_session(backup_path(p)).sorting.unit(u).note == "after load"
    assert os.path.getsize(p) < static.stat().st_size / 4      # the state part is the small one


def test_saving_reads_nothing_back_and_loading_reads_each_dataset_once(made, tmp_path, monkeypatch):  # noqa: F811
    raw, s = made
    reads = collections.Counter()
    original = h5py.Dataset.__getitem__

    def counting(ds, key):
        reads[(os.path.basename(ds.file.filename), ds.name)] += 1
        return original(ds, key)

    monkeypatch.setattr(h5py.Dataset, "__getitem__", counting)
    p = save_session(tmp_path / "a.h5", copy_session(s))
    assert not reads
    back = load_session(p)
    names = set()
    for part in (p, static_of(p)):
        with h5py.File(part, "r") as f:
            f.visititems(lambda n, o, at=part.name: names.add((at, "/" + n)) if isinstance(o, h5py.Dataset) else None)
    monkeypatch.setattr(h5py.Dataset, "__getitem__", original)
    assert set(reads) == names and set(reads.values()) == {1}
    assert back.sorting.state_equal(s.sorting)


def test_a_new_sorting_under_the_same_name_keeps_the_backup_whole(made, tmp_path):  # noqa: F811
    raw, s = made
    p = save_session(tmp_path / "a.h5", copy_session(s))
    events, x, names, _ = make_events(n=900, n_groups=2, clusters=2, seed=77)
    other = Session(s.recording, s.params, events, first_pass(events, x, seed=1, feature_names=names))
    save_session(p, other)
    assert len(list(tmp_path.glob("a.h5.static-*"))) == 2
    assert len(load_session(p).events) == 900
    assert load_session(backup_path(p)).sorting.state_equal(s.sorting)


def test_missing_damaged_or_foreign_static_parts_are_refused(made, tmp_path):  # noqa: F811
    raw, s = made
    p = save_session(tmp_path / "a.h5", copy_session(s))
    static = static_of(p)
    good = static.read_bytes()
    flip_bit(static, "features/values", 5, 0x10)
    with pytest.raises(SessionError, match="static part must match its checksum"):
        load_session(p)
    events, x, names, _ = make_events(n=900, n_groups=2, clusters=2, seed=78)
    foreign = save_session(tmp_path / "b.h5", Session(s.recording, s.params, events,
                                                      first_pass(events, x, seed=1, feature_names=names)))
    static.write_bytes(static_of(foreign).read_bytes())
    with pytest.raises(SessionError, match="must exist with checksum"):
        verify_session_file(p)
    with pytest.raises(SessionError, match="must be the one its state was saved with"):
        load_session(p)
    static.unlink()
    with pytest.raises(SessionError, match="static part must exist"):
        load_session(p)
    static.write_bytes(good)
    with h5py.File(p, "r+") as f:
        f.attrs["static_part"] = "../" + static.name
        f.attrs["checksum"] = read_verified(f, p, per_dataset=True)[1]
    with pytest.raises(SessionError, match="must be a file name beside the session"):
        load_session(p)


def test_format_2_one_file_sessions_still_open(made, tmp_path):  # noqa: F811
    raw, s = made
    p = save_session(tmp_path / "a.h5", copy_session(s))
    old = tmp_path / "old.h5"
    with h5py.File(p, "r") as f, h5py.File(static_of(p), "r") as g, h5py.File(old, "w") as out:
        for src in (f, g):
            for name in src:
                src.copy(name, out)
        out.attrs.update({k: v for k, v in f.attrs.items() if k not in ("static_part", "static_checksum")})
        out.attrs["format_version"] = 2
    with h5py.File(old, "r+") as out:      # format 2: one SHA-256 over everything, read back
        out.attrs["checksum"] = read_verified(out, old)[1]
    back = load_session(old)
    assert back.sorting.state_equal(s.sorting) and np.array_equal(back.events.sample, s.events.sample)
    assert np.array_equal(back.sorting.data.features, s.sorting.data.features)
    save_session(old, back)                # saved again: format 3 beside it
    with h5py.File(old, "r") as f:
        assert f.attrs["format_version"] == 3 and "events" not in f
    assert load_session(old).sorting.state_equal(s.sorting)
