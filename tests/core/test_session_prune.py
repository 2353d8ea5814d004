"""Static parts of earlier sortings are removed once no session file in the folder names them;
nothing else is ever deleted (common practice, no source: a clean-up that only removes what it
can prove it wrote and nobody uses)."""

import shutil

from rigside.core.units.first_pass import first_pass
from rigside.core.units.session import Session, backup_path, load_session, save_session
from rigside.core.units.session_write import prune_static_parts

from .sorting_data import make_events
from .test_session import copy_session, made, static_of  # noqa: F401  (module fixture and helpers)


def _other(s, seed):
    events, x, names, _ = make_events(n=600 + 100 * seed, n_groups=2, clusters=2, seed=70 + seed)
    return Session(s.recording, s.params, events, first_pass(events, x, seed=seed, feature_names=names))


def test_parts_no_file_names_are_removed_and_named_ones_kept(made, tmp_path):  # noqa: F811
    raw, s = made
    p = save_session(tmp_path / "a.h5", copy_session(s))
    first = static_of(p)
    save_session(p, _other(s, 1))                    # the backup still names the first part
    second = static_of(p)
    assert first.exists() and second.exists()
    save_session(p, _other(s, 2))                    # now main and backup name the second and third
    assert not first.exists() and second.exists() and static_of(p).exists()
    assert static_of(backup_path(p)) == second
    assert len(load_session(p).events) == 800 and len(load_session(backup_path(p)).events) == 700


def test_a_copied_state_file_keeps_its_part(made, tmp_path):  # noqa: F811
    raw, s = made
    p = save_session(tmp_path / "a.h5", copy_session(s))
    shutil.copyfile(p, tmp_path / "kept copy.h5")       # names a.h5's first static part
    first = static_of(p)
    save_session(p, _other(s, 1))
    save_session(p, _other(s, 2))
    assert first.exists()
    assert load_session(tmp_path / "kept copy.h5").sorting.state_equal(s.sorting)


def test_foreign_files_and_unreadable_state_files_stop_the_removal(made, tmp_path):  # noqa: F811
    raw, s = made
    p = save_session(tmp_path / "a.h5", copy_session(s))
    foreign = tmp_path / "a.h5.static-0123456789abcdef.h5"
    foreign.write_bytes(b"not ours")
    first = static_of(p)
    save_session(p, _other(s, 1))
    backup_path(p).write_bytes(b"damaged")              # cannot tell what it named
    assert prune_static_parts(p, [p, backup_path(p)]) == []
    assert first.exists() and foreign.exists()
    backup_path(p).unlink()
    assert prune_static_parts(p, [p, backup_path(p)]) == [first]
    assert foreign.read_bytes() == b"not ours"


def test_a_numbered_backup_keeps_its_part(made, tmp_path):  # noqa: F811
    # sort --overwrite keeps NAME.bak, NAME.bak.1, ...: any session file in the folder counts, whatever its name
    raw, s = made
    p = save_session(tmp_path / "a.h5", copy_session(s))
    first = static_of(p)
    shutil.copyfile(p, tmp_path / "a.h5.bak.1")
    save_session(p, _other(s, 1))
    save_session(p, _other(s, 2))
    assert first.exists()
    assert load_session(tmp_path / "a.h5.bak.1").sorting.state_equal(s.sorting)
