"""Autosave and crash recovery of session files.

After a crash the session may exist as up to three files: the main file, its autosave
(``NAME.autosave.h5``) and its backup (``NAME.bak``, the previous main file). Each is verified
(format and checksum) and the newest consistent one is offered or loaded.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path

from rigside.core.errors import SessionError
from rigside.core.io.atomic import fsync_dir, safe_unlink, stale_temporaries
from rigside.core.units.session import (
    RecordingChanged,
    RecordingMoved,
    Session,
    autosave_path,
    backup_path,
    load_session,
    save_autosave,
    verify_session_file,
)


class Autosaver:
    """Autosave after changes, at most once per ``interval_s``.

    Connect :meth:`mark_changed` to ``sorting.changed`` and call :meth:`save_if_due` from a
    timer (or after each step); :meth:`mark_saved` after a main save.
    """

    def __init__(self, path: str | Path, interval_s: float = 30.0, clock=time.monotonic) -> None:
        self.path, self.interval_s, self.clock = Path(path), float(interval_s), clock
        self.dirty = False
        self._last = -float("inf")

    def mark_changed(self, *_) -> None:
        """Note unsaved changes (connect to ``sorting.changed``)."""
        self.dirty = True

    def mark_saved(self) -> None:
        """Note that everything is saved (after a main save)."""
        self.dirty = False

    def save_if_due(self, session: Session, force: bool = False) -> Path | None:
        """Write the autosave file if there are unsaved changes and the interval has passed."""
        now = self.clock()
        if not self.dirty or (not force and now - self._last < self.interval_s):
            return None
        out = save_autosave(self.path, session)
        self.dirty, self._last = False, now
        return out


@dataclass
class SavedState:
    """One candidate file: its kind ("main", "autosave", "backup"), save time, or the error."""

    path: Path
    kind: str
    saved_utc: str | None
    error: str | None


def find_states(path: str | Path) -> list[SavedState]:
    """Every existing state of a session, valid ones first, newest first."""
    out = []
    for kind, p in (("main", Path(path)), ("autosave", autosave_path(path)), ("backup", backup_path(path))):
        if not p.exists():
            continue
        try:
            out.append(SavedState(p, kind, verify_session_file(p), None))
        except SessionError as exc:
            out.append(SavedState(p, kind, None, str(exc)))
    valid = sorted((s for s in out if s.error is None), key=lambda s: s.saved_utc, reverse=True)
    return valid + [s for s in out if s.error is not None]


def recover(path: str | Path, **load_options) -> Session:
    """Load the newest consistent state among main file, autosave and backup.

    ``load_options`` go to :func:`load_session`. Raises :class:`SessionError` listing every
    candidate's problem when none can be loaded.
    """
    problems = []
    for state in find_states(path):
        if state.error is not None:
            problems.append(f"{state.kind}: {state.error}")
            continue
        try:
            return load_session(state.path, **load_options)
        except (RecordingMoved, RecordingChanged):
            raise
        except SessionError as exc:
            problems.append(f"{state.kind}: {exc}")
    raise SessionError(f"session {str(path)!r} must have at least one consistent saved state, got "
                       + ("; ".join(problems) if problems else "no files"))


def remove_stale_temporaries(path: str | Path) -> None:
    """Delete temporary files left by a save that was killed (they are never read)."""
    for p in (Path(path), autosave_path(path), backup_path(path)):
        for tmp in stale_temporaries(p):
            safe_unlink(tmp)
    fsync_dir(Path(path).parent)
