"""Undo and redo over a sorting, recording every step in its journal, and replay of a journal.

The window binds steps to Qt's undo stack through :meth:`UndoStack.apply`,
:meth:`UndoStack.revert` and :meth:`UndoStack.reapply`; headless code uses
:meth:`UndoStack.push`, :meth:`UndoStack.undo` and :meth:`UndoStack.redo`. Replaying the journal
entries in order on an empty sorting reproduces the assignments exactly, because each step is
deterministic (clustering steps carry their seed) and undo/redo entries are replayed as such.
"""

from __future__ import annotations

from typing import Any, Iterable

from rigside.core.errors import CurationError
from rigside.core.progress import check, report
from rigside.core.units.journal import Journal
from rigside.core.units.operations import ClusterGroups, operation_from_record
from rigside.core.units.sorting import Sorting


class UndoStack:
    """Undo/redo over a sorting, recording every step in ``sorting.journal``.

    Use either the primitives :meth:`apply` / :meth:`revert` / :meth:`reapply` (when another
    stack, e.g. Qt's, keeps the order) or :meth:`push` / :meth:`undo` / :meth:`redo`, not both.
    """

    def __init__(self, sorting: Sorting) -> None:
        self.sorting = sorting
        self._done: list = []
        self._undone: list = []

    # ---- primitives (what a QUndoCommand calls) -------------------------------------------
    def apply(self, op) -> None:
        """Do a new step and journal it."""
        op.do(self.sorting)
        op.journal_seq = self.sorting.journal.record("do", op)["seq"]
        if op.journal_seq == 0:
            self.sorting.origin = self.sorting.state()

    def revert(self, op) -> None:
        """Undo a step and journal it."""
        op.undo(self.sorting)
        self.sorting.journal.record("undo", op, ref=op.journal_seq)

    def reapply(self, op) -> None:
        """Redo an undone step and journal it."""
        op.do(self.sorting)
        self.sorting.journal.record("redo", op, ref=op.journal_seq)

    # ---- a plain stack for headless use -----------------------------------------------------
    def push(self, op) -> None:
        """Do a new step; the redo history is dropped."""
        self.apply(op)
        self._done.append(op)
        self._undone.clear()

    def undo(self) -> None:
        """Undo the last done step."""
        if not self._done:
            raise CurationError("undo needs a step to undo, got none")
        op = self._done.pop()
        self.revert(op)
        self._undone.append(op)

    def redo(self) -> None:
        """Redo the last undone step."""
        if not self._undone:
            raise CurationError("redo needs an undone step, got none")
        op = self._undone.pop()
        self.reapply(op)
        self._done.append(op)

    @property
    def undo_text(self) -> str | None:
        """Menu text of the step :meth:`undo` would undo, if any."""
        return self._done[-1].text if self._done else None

    @property
    def redo_text(self) -> str | None:
        """Menu text of the step :meth:`redo` would redo, if any."""
        return self._undone[-1].text if self._undone else None


def replay(entries: Iterable[dict[str, Any]], sorting: Sorting, progress=None, cancel=None) -> Sorting:
    """Replay journal entries on ``sorting`` (normally empty), rewriting its journal.

    Raises :class:`CurationError` when an entry cannot be replayed as recorded (unknown
    operation, undo of a step that is not the last done, a step creating other unit ids).
    """
    _replay_stack(entries, sorting, progress, cancel)
    return sorting


def _replay_stack(entries: Iterable[dict[str, Any]], sorting: Sorting, progress=None, cancel=None) -> UndoStack:
    """Replay (see :func:`replay`) and return the stack, whose done steps hold their deltas."""
    entries = list(entries)
    stack = UndoStack(sorting)
    by_seq: dict[int, Any] = {}
    for i, e in enumerate(entries):
        check(cancel)
        report(progress, i / max(1, len(entries)), f"replaying step {i + 1} of {len(entries)}")
        action = e["action"]
        if action == "do":
            op = operation_from_record(e["op"])
            if isinstance(op, ClusterGroups):
                op.progress, op.cancel = progress, cancel
            stack.push(op)
            by_seq[e["seq"]] = op
            continue
        pending = stack._done if action == "undo" else stack._undone
        if not pending or by_seq.get(e.get("ref")) is not pending[-1]:
            which = "last done" if action == "undo" else "last undone"
            raise CurationError(f"journal entry {e['seq']} must {action} the {which} step, "
                                f"got a reference to step {e.get('ref')!r}")
        if action == "undo":
            stack.undo()
        else:
            stack.redo()
    report(progress, 1.0, "replay done")
    return stack


def replay_matches(sorting: Sorting, progress=None, cancel=None) -> bool:
    """Whether replaying ``sorting.journal`` from scratch reproduces ``sorting`` exactly."""
    fresh = Sorting(sorting.data)
    replay(sorting.journal.entries, fresh, progress, cancel)
    return fresh.state_equal(sorting)



def rebuild_history(sorting: Sorting, progress=None, cancel=None) -> list | None:
    """The steps of ``sorting.journal`` that are done now, oldest first, each ready to be undone
    on ``sorting`` with its exact delta (recomputed by replaying the journal from scratch).

    The journal's opening step (the first pass) is left out: there is no earlier state to return
    to. Returns None when the replay does not reproduce ``sorting`` exactly, so that no history
    is offered that would not undo to the recorded states.

    When the sorting knows its :attr:`~Sorting.origin` (the state after the opening step) and
    no later entry undoes or redoes that step, the replay starts there instead of redoing the
    first pass.
    """
    entries = sorting.journal.entries
    origin = sorting.origin
    if origin is not None and entries and entries[0]["action"] == "do" and all(
            e.get("ref") != 0 for e in entries[1:]):
        fresh = Sorting.from_state(sorting.data, origin, Journal(entries[:1]))
        fresh.origin, entries = origin, entries[1:]
    else:
        fresh = Sorting(sorting.data)
    try:
        stack = _replay_stack(entries, fresh, progress, cancel)
    except CurationError:
        return None
    if not fresh.state_equal(sorting):
        return None
    return [op for op in stack._done if op.journal_seq != 0]
