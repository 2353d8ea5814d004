"""A save or autosave killed at any step leaves a session that loads to the last or the previous
state; only the state part is written after the first save (the static part stays as it was)."""

import os
import signal
from pathlib import Path

import pytest

from rigside.core.io.atomic import stale_temporaries
from rigside.core.units.history import UndoStack
from rigside.core.units.operations import SetNote
from rigside.core.units.session import (
    autosave_path,
    backup_path,
    load_session,
    save_autosave,
    save_session,
    verify_session_file,
)
from rigside.core.units.session_recovery import recover, remove_stale_temporaries

from .test_session import copy_session, made, static_of  # noqa: F401  (module fixture and helpers)

STOPS = {  # where the saving child stops to be killed, and the state the file must then hold
    "writing": "previous",        # the temporary file is open and half written
    "written": "previous",        # the temporary file is complete and synced, not yet renamed
    "backup": "previous",         # the previous main file became the backup, the new one not yet renamed
    "renamed": "new",             # the rename onto the session file has happened
    "between": "new",             # the save returned, the next has not begun
}


def _save_and_stop(path, session, first, stop_at, autosave, new_static, report_fd, hold_fd):
    """Child process: save (or autosave) states first, first+1, ...; on the second, at the point
    ``stop_at``, report "<state>" through ``report_fd`` and wait (until killed) on ``hold_fd``.
    With ``new_static`` the second state is of a new first pass, so that save writes a new
    static part first (its "writing" and "written" points are the static part's)."""
    import rigside.core.io.atomic as atomic_module
    import rigside.core.io.h5image as h5image_module

    def stop(k):
        os.write(report_fd, f"{k}\n".encode())
        os.read(hold_fd, 1)           # never written: the parent kills us here

    try:
        stack = UndoStack(session.sorting)
        u = session.sorting.unit_ids()[0]
        current = {"k": first}
        write_to, fsync_file, replace = h5image_module._Pages.write_to, atomic_module.fsync_file, os.replace

        def at(point):
            return current["k"] == first + 1 and stop_at == point

        def write_to_hook(pages, fh, reserved):
            # the temporary file holds the arrays, its metadata are still in memory
            if at("writing") and fh.name.endswith(".tmp"):
                stop(current["k"])
            write_to(pages, fh, reserved)

        def fsync_hook(p):
            fsync_file(p)
            if at("written") and str(p).endswith(".tmp"):
                stop(current["k"])

        target = autosave_path(path) if autosave else Path(path)

        def replace_hook(src, dst):
            replace(src, dst)
            if (at("renamed") and Path(dst) == target) or (at("backup") and Path(dst) == backup_path(path)):
                stop(current["k"])

        h5image_module._Pages.write_to, atomic_module.fsync_file, os.replace = write_to_hook, fsync_hook, replace_hook
        for k in range(first, first + 3):
            current["k"] = k
            stack.push(SetNote(u, f"state {k}"))
            if new_static and k == first + 1:
                session.sorting.origin = session.sorting.state()
            (save_autosave if autosave else save_session)(path, session)
            if at("between"):
                stop(k)
    finally:
        os._exit(0)


def _state_on_disk(path) -> int:
    s = recover(path, check_recording=False)
    return int(s.sorting.unit(s.sorting.unit_ids()[0]).note.split()[1])


@pytest.mark.skipif(not hasattr(os, "fork") or not hasattr(signal, "SIGKILL"),
                    reason="killing a save half-way needs fork and SIGKILL (POSIX)")
@pytest.mark.parametrize("new_static", [False, True], ids=["state", "new-static"])
@pytest.mark.parametrize("autosave", [False, True], ids=["save", "autosave"])
@pytest.mark.parametrize("stop_at", list(STOPS))
def test_sigkill_at_each_step_of_an_incremental_save_keeps_a_complete_state(made, tmp_path, stop_at,  # noqa: F811
                                                                            autosave, new_static):
    if autosave and stop_at == "backup":
        pytest.skip("an autosave keeps no backup")
    raw, s = made
    p = tmp_path / "killed.h5"
    s1 = copy_session(s)
    UndoStack(s1.sorting).push(SetNote(s1.sorting.unit_ids()[0], "state 0"))
    save_session(p, s1)
    static = static_of(p)
    before = static.stat()
    report_r, report_w = os.pipe()
    hold_r, hold_w = os.pipe()
    pid = os.fork()
    if pid == 0:
        os.close(report_r)
        os.close(hold_w)
        _save_and_stop(p, s1, 1, stop_at, autosave, new_static, report_w, hold_r)
    os.close(report_w)
    os.close(hold_r)
    try:
        stopped_in = int(os.read(report_r, 64).split()[0])   # blocks until the child is at the point
        os.kill(pid, signal.SIGKILL)
        os.waitpid(pid, 0)
    finally:
        os.close(report_r)
        os.close(hold_w)
    assert stopped_in == 2                                    # the second save of the child
    want = stopped_in - 1 if STOPS[stop_at] == "previous" else stopped_in
    assert _state_on_disk(p) == want
    assert bool(stale_temporaries(p)) == (stop_at in ("writing", "written", "backup"))   # and the autosave's
    if not autosave:
        verify_session_file(backup_path(p))                   # the backup is always a whole file
    after = static.stat()                                     # the static part was written once
    assert (after.st_ino, after.st_mtime_ns) == (before.st_ino, before.st_mtime_ns)
    parts = sorted(q.name for q in tmp_path.glob("killed.h5.static-*"))
    if new_static and stop_at not in ("writing", "written"):  # the new part is in place before the state
        assert len(parts) == 2 and static.name in parts       # the old part stays: the backup names it
    else:
        assert parts == [static.name]
    remove_stale_temporaries(p)
    assert not stale_temporaries(p) and _state_on_disk(p) == want
    assert load_session(p, check_recording=False).sorting.unit(s1.sorting.unit_ids()[0]).note == \
        ("state 0" if autosave else f"state {want}")          # the main file untouched by autosaves
