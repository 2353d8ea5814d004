import contextlib
import os
import subprocess
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest

from rigside.core.errors import SessionError
from rigside.core.io.h5safe import read_verified, write_text
from rigside.core.params import Params
from rigside.core.units.first_pass import first_pass
from rigside.core.units.history import UndoStack, replay, replay_matches
from rigside.core.units.journal import Journal
from rigside.core.units.operations import MergeUnits, MoveEvents, Relabel, SetNote
from rigside.core.units.session import (
    RecordingChanged,
    RecordingMoved,
    RecordingRef,
    Session,
    autosave_path,
    backup_path,
    file_fingerprint,
    load_session,
    save_autosave,
    save_session,
    snapshot,
)
from rigside.core.units.session_recovery import Autosaver, find_states, recover, remove_stale_temporaries
from rigside.core.units.sorting import Sorting

from .sorting_data import make_events


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    d = tmp_path_factory.mktemp("session")
    raw = d / "rec.bin"
    raw.write_bytes(np.random.default_rng(0).integers(0, 255, 3 << 20, dtype=np.uint8).tobytes())
    events, x, names, truth = make_events(n=2000, n_groups=2, clusters=2, seed=31)
    sorting = first_pass(events, x, seed=2, feature_names=names)
    stack = UndoStack(sorting)
    ids = sorting.unit_ids()
    stack.push(MergeUnits(ids[:2]))
    stack.push(Relabel([ids[0]], "single unit"))
    stack.push(SetNote(ids[0], "clean — ünïcode ok"))
    stack.push(MoveEvents(sorting.events_of(ids[2])[:20], None))
    stack.undo()
    params = Params()
    params.detect.threshold_sigma = 5.25
    ref = RecordingRef(str(raw), raw.stat().st_size, file_fingerprint(raw), {"channels": 8})
    return raw, Session(ref, params, events, sorting)


def copy_session(s: Session) -> Session:
    so = s.sorting
    sorting = Sorting(so.data, so.assignments, so.units, so.next_id, Journal(so.journal.entries))
    return Session(RecordingRef(**vars(s.recording)), s.params, s.events, sorting)


def flip_bit(path, dataset: str, byte: int, mask: int) -> None:
    """Flip the ``mask`` bits of one byte of an HDF5 file, ``byte`` bytes into the stored data of ``dataset``."""
    with h5py.File(path, "r") as f:
        offset = f[dataset].id.get_offset()
    data = bytearray(Path(path).read_bytes())
    data[offset + byte] ^= mask
    Path(path).write_bytes(bytes(data))


def static_of(path) -> Path:
    """The static part a format-3 session file refers to."""
    with h5py.File(path, "r") as f:
        return Path(path).parent / f.attrs["static_part"]


class _Parts:
    """Both files of a format-3 session addressed as one (events and features in the static part)."""

    def __init__(self, state, static):
        self.state, self.static, self.attrs = state, static, state.attrs

    def _file(self, key):
        return self.static if key.strip("/").split("/")[0] in ("events", "features") else self.state

    def __getitem__(self, key):
        return self._file(key)[key]

    def __setitem__(self, key, value):
        self._file(key)[key] = value

    def __delitem__(self, key):
        del self._file(key)[key]

    def create_dataset(self, key, **options):
        return self._file(key).create_dataset(key, **options)


@contextlib.contextmanager
def edit_session(path):
    """Open a saved session's two parts for writing."""
    static = static_of(path)
    with h5py.File(path, "r+") as f, h5py.File(static, "r+") as g:
        yield _Parts(f, g)


def reseal(path):
    """Recompute the checksums after a deliberate edit, as a hostile author could."""
    static = static_of(path)
    with h5py.File(static, "r+") as g:
        g.attrs["checksum"] = digest = read_verified(g, static, per_dataset=True)[1]
    with h5py.File(path, "r+") as f:
        f.attrs["static_checksum"] = digest
        f.attrs["checksum"] = read_verified(f, path, per_dataset=True)[1]


def test_round_trip_keeps_everything(made, tmp_path):
    raw, s = made
    p = save_session(tmp_path / "a.h5", copy_session(s))
    back = load_session(p)
    assert back.sorting.state_equal(s.sorting)
    assert back.sorting.assignments.tobytes() == s.sorting.assignments.tobytes()
    assert back.sorting.journal.entries == s.sorting.journal.entries
    assert np.array_equal(back.sorting.data.features, s.sorting.data.features)
    assert back.sorting.data.feature_names == s.sorting.data.feature_names
    assert back.params.to_dict() == s.params.to_dict()
    assert back.recording == s.recording
    assert np.array_equal(back.events.sample, s.events.sample) and back.events.rate_hz == s.events.rate_hz
    assert back.program_version and back.saved_utc.endswith("+00:00")
    assert back.sorting.units[s.sorting.unit_ids()[0]].note == "clean — ünïcode ok"


def test_journal_replay_reproduces_the_saved_assignments(made, tmp_path):
    raw, s = made
    back = load_session(save_session(tmp_path / "a.h5", copy_session(s)))
    replayed = replay(back.sorting.journal.entries, Sorting(back.sorting.data))
    assert replayed.state_equal(back.sorting)
    assert replay_matches(back.sorting)
    UndoStack(back.sorting).push(SetNote(back.sorting.unit_ids()[0], "kept"))
    assert replay_matches(back.sorting)


def test_second_save_keeps_the_first_as_backup(made, tmp_path):
    raw, s = made
    s1 = copy_session(s)
    p = save_session(tmp_path / "a.h5", s1)
    UndoStack(s1.sorting).push(SetNote(s1.sorting.unit_ids()[1], "second"))
    save_session(p, s1)
    assert load_session(p).sorting.unit(s1.sorting.unit_ids()[1]).note == "second"
    assert load_session(backup_path(p)).sorting.unit(s1.sorting.unit_ids()[1]).note == ""


def _corrupt_then_check(p, mutate, message):
    mutate(p)
    with pytest.raises(SessionError, match=message):
        load_session(p)


def test_truncated_flipped_and_wrong_type_files_are_refused_and_backup_kept(made, tmp_path):
    raw, s = made
    s1 = copy_session(s)
    p = save_session(tmp_path / "a.h5", s1)
    save_session(p, s1)
    good_backup = backup_path(p).read_bytes()
    data = p.read_bytes()
    # truncated
    p.write_bytes(data[: len(data) // 2])
    with pytest.raises(SessionError, match=r"readable HDF5 file|must be readable") as info:
        load_session(p)
    assert "other saved states exist" in str(info.value) and ".bak" in str(info.value)
    # a flipped bit inside the assignments' stored bytes
    p.write_bytes(data)
    flip_bit(p, "sorting/assignments", 17, 0x04)
    with pytest.raises(SessionError, match="checksum"):
        load_session(p)
    # saving over a damaged main file must not replace the good backup with it
    save_session(p, s1)
    assert backup_path(p).read_bytes() == good_backup
    # wrong types: text, and an HDF5 file that is not a session
    (tmp_path / "t.h5").write_text("unit,label,time_s\n")
    with pytest.raises(SessionError, match="readable HDF5 file"):
        load_session(tmp_path / "t.h5")
    with h5py.File(tmp_path / "o.h5", "w") as f:
        f["x"] = np.arange(3)
    with pytest.raises(SessionError, match="format must be present|must have format"):
        load_session(tmp_path / "o.h5")
    with pytest.raises(SessionError, match="must exist"):
        load_session(tmp_path / "none.h5")


def test_random_byte_flips_never_load_wrong_content(made, tmp_path):
    raw, s = made
    p = save_session(tmp_path / "a.h5", copy_session(s))
    data = p.read_bytes()
    rng = np.random.default_rng(5)
    for pos in rng.integers(0, len(data), 40):
        bad = bytearray(data)
        bad[pos] ^= 1 << int(rng.integers(0, 8))
        p.write_bytes(bytes(bad))
        try:
            back = load_session(p)
        except SessionError:
            continue
        # a flip in unused bytes (padding, free space) may be harmless: then content is intact
        assert back.sorting.state_equal(s.sorting)


HOSTILE = {
    "float assignments": (lambda f: (f["sorting"].__delitem__("assignments"),
                                     f["sorting"].create_dataset("assignments", data=np.zeros(2000))),
                          "assignments must be int32"),
    "missing group": (lambda f: f.__delitem__("sorting"), "must be present"),
    "text id counter": (lambda f: f["sorting"].attrs.__setitem__("next_id", "many"), "next_id must be int"),
    "huge id counter": (lambda f: f["sorting"].attrs.__setitem__("next_id", 2**40), "next unit id must be from 1"),
    "text rate": (lambda f: f["events"].attrs.__setitem__("rate_hz", "fast"), "rate_hz must be float"),
    "string dataset": (lambda f: f["journal"].create_dataset("evil", data=["import os"],
                                                             dtype=h5py.string_dtype()),
                       "numeric array"),
    "external link": (lambda f: f.__setitem__("ext", h5py.ExternalLink("/etc/passwd", "/x")), "ExternalLink"),
    "label name": (lambda f: (f["sorting"].__delitem__("labels"), write_text(f["sorting"], "labels", '["good"]')),
                   "unit labels must be among unreviewed, single unit"),
    "unknown unit": (lambda f: f["sorting/assignments"].__setitem__(0, 999), "unknown ids"),
    "bad json": (lambda f: f["params"].attrs.__setitem__("json", "{not json"), "as JSON"),
    "bad params": (lambda f: f["params"].attrs.__setitem__("json", '{"detect": {"x": 1}}'),
                   "parameters must be valid"),
    "3-D features": (lambda f: (f["features"].__delitem__("values"),
                                f["features"].create_dataset("values", data=np.zeros((2, 2, 2), "f4"))),
                     "numeric array of at most 2"),
    "short features": (lambda f: (f["features"].__delitem__("values"),
                                  f["features"].create_dataset("values", data=np.zeros((5, 5), "f4"))),
                       "must agree in length"),
    "newer format": (lambda f: f.attrs.__setitem__("format_version", 7), "version must be from 1 to 3"),
    "bad journal": (lambda f: (f["journal"].__delitem__("lines"),
                               f["journal"].create_dataset("lines", data=np.frombuffer(b"\xff\xfe", "u1"))),
                    "UTF-8"),
}


@pytest.mark.parametrize("name", list(HOSTILE))
def test_hostile_files_give_session_errors(made, tmp_path, name):
    raw, s = made
    p = save_session(tmp_path / "h.h5", copy_session(s))
    mutate, message = HOSTILE[name]
    with edit_session(p) as f:
        mutate(f)
    with pytest.raises(SessionError, match=f"checksum|{message}"):
        load_session(p)
    try:
        reseal(p)
    except SessionError:
        pass  # refused even before a checksum can be computed (links)
    with pytest.raises(SessionError, match=message):
        load_session(p)


def test_huge_declared_shapes_are_refused_before_reading(made, tmp_path):
    raw, s = made
    p = save_session(tmp_path / "h.h5", copy_session(s))
    with h5py.File(static_of(p), "r+") as f:
        del f["features/values"]
        f["features"].create_dataset("values", shape=(10**11, 8), dtype="f4", chunks=(1024, 8))
    with pytest.raises(SessionError, match="must fit the file's size"):
        load_session(p)


def test_moved_and_changed_recordings(made, tmp_path):
    raw, s = made
    own = tmp_path / "rec.bin"
    own.write_bytes(raw.read_bytes())
    s1 = copy_session(s)
    s1.recording = RecordingRef(str(own), own.stat().st_size, file_fingerprint(own), {})
    p = save_session(tmp_path / "a.h5", s1)
    moved = tmp_path / "elsewhere.bin"
    os.replace(own, moved)
    with pytest.raises(RecordingMoved) as info:
        load_session(p)
    assert info.value.recorded_path == str(own)
    back = load_session(p, recording_path_override=moved)
    assert back.recording.path == str(moved.resolve())
    # same size, one byte changed in the middle block: the fingerprint differs
    data = bytearray(moved.read_bytes())
    data[len(data) // 2] ^= 0xFF
    moved.write_bytes(bytes(data))
    with pytest.raises(RecordingChanged, match="changed content"):
        load_session(p, recording_path_override=moved)
    moved.write_bytes(bytes(data[:-10]))
    with pytest.raises(RecordingChanged, match="changed"):
        load_session(p, recording_path_override=moved)
    assert load_session(p, check_recording=False).sorting.state_equal(s.sorting)


def test_autosave_and_recovery_pick_the_newest_consistent_state(made, tmp_path):
    raw, s = made
    s1 = copy_session(s)
    p = save_session(tmp_path / "a.h5", s1)
    u = s1.sorting.unit_ids()[1]
    saver = Autosaver(p, interval_s=10.0, clock=lambda: now[0])
    now = [100.0]
    s1.sorting.changed.connect(saver.mark_changed)
    UndoStack(s1.sorting).push(SetNote(u, "autosaved"))
    assert saver.save_if_due(s1) == autosave_path(p)
    UndoStack(s1.sorting).push(SetNote(u, "too soon"))
    assert saver.save_if_due(s1) is None
    now[0] = 111.0
    assert saver.save_if_due(s1) == autosave_path(p)
    assert recover(p).sorting.unit(u).note == "too soon"
    # main corrupt, autosave corrupt -> the backup (the first saved state) is still found
    save_session(p, s1)
    save_autosave(p, s1)
    for q in (p, autosave_path(p)):
        q.write_bytes(q.read_bytes()[:1000])
    states = find_states(p)
    assert [st.kind for st in states] == ["backup", "main", "autosave"]
    assert states[1].error and "readable" in states[1].error
    assert recover(p).sorting.unit(u).note == ""
    backup_path(p).unlink()
    with pytest.raises(SessionError, match="at least one consistent saved state"):
        recover(p)


def test_stale_temporary_files_are_ignored_and_removed(made, tmp_path):
    raw, s = made
    p = save_session(tmp_path / "a.h5", copy_session(s))
    (tmp_path / ".a.h5.k3x9q_.tmp").write_bytes(b"half a file")
    assert load_session(p).sorting.state_equal(s.sorting)
    save_session(p, copy_session(s))
    remove_stale_temporaries(p)
    assert not (tmp_path / ".a.h5.k3x9q_.tmp").exists()


def test_a_snapshot_saves_the_state_it_was_taken_in(made, tmp_path):
    raw, s = made
    live = copy_session(s)
    frozen = snapshot(live)
    UndoStack(live.sorting).push(SetNote(live.sorting.unit_ids()[0], "after the snapshot"))
    back = load_session(save_session(tmp_path / "a.h5", frozen))
    assert back.sorting.state_equal(s.sorting) and not back.sorting.state_equal(live.sorting)


def test_replay_in_a_fresh_process_reproduces_the_saved_assignments(made, tmp_path):
    raw, s = made
    p = save_session(tmp_path / "a.h5", copy_session(s))
    code = ("import sys; from rigside.core.units.session import load_session; "
            "from rigside.core.units.history import replay_matches; "
            "s = load_session(sys.argv[1], check_recording=False); print(replay_matches(s.sorting))")
    root = Path(__file__).resolve().parents[2]
    out = subprocess.run([sys.executable, "-c", code, str(p)], cwd=root, capture_output=True, text=True,
                         timeout=120, env={**os.environ, "OMP_NUM_THREADS": "2"})
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "True"
