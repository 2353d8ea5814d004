"""Rejected curation suggestions, remembered in the journal as steps that change nothing.

A curator who rejects a suggested merge or split takes a step of its own,
:class:`DismissSuggestion`: it is journaled, saved with the session, undone and redone like every
other step, and it changes no assignment, unit or id. A rejection names the suggestion's kind,
its units and a digest of their events (:func:`members_digest`), so it holds while those units
keep exactly their events; once one of them changes, the suggestion may be offered again on its
new evidence. :func:`dismissed_keys` reads the rejections in force from a journal (steps done and
not undone), so sessions saved before this step existed simply have none.
"""

from __future__ import annotations

import hashlib
from typing import Any, Iterable

import numpy as np

from rigside.core.errors import CurationError
from rigside.core.units.operation_base import Operation, as_int, make_delta
from rigside.core.units.sorting import Delta, Sorting

SUGGESTION_KINDS = ("merge", "split")
"""What a suggestion proposes: merging two units, or splitting one in two."""
UNIT_COUNT = {"merge": 2, "split": 1}


def members_digest(sorting: Sorting, units: Iterable[int]) -> str:
    """First 16 hex digits of SHA-256 over the sorted event indices (int64, little-endian) of
    each unit in turn, the units in increasing order."""
    h = hashlib.sha256()
    for u in sorted(int(u) for u in units):
        h.update(np.int64(u).astype("<i8").tobytes())
        h.update(np.ascontiguousarray(sorting.events_of(u), dtype="<i8").tobytes())
    return h.hexdigest()[:16]


def suggestion_key(kind: str, units: Iterable[int], digest: str) -> str:
    """The text naming one suggestion, e.g. ``merge:3+5:1f0c...`` (kind, units, events digest)."""
    return f"{kind}:{'+'.join(str(u) for u in sorted(int(u) for u in units))}:{digest}"


def key_of(sorting: Sorting, kind: str, units: Iterable[int]) -> str:
    """The key of a suggestion about ``units`` as they are now in ``sorting``."""
    units = sorted(int(u) for u in units)
    return suggestion_key(kind, units, members_digest(sorting, units))


class DismissSuggestion(Operation):
    """Reject a suggested merge or split: remembered, undoable, and changing nothing else."""

    kind = "dismiss_suggestion"

    def __init__(self, suggestion: str, units: list[int], members: str) -> None:
        super().__init__()
        if suggestion not in SUGGESTION_KINDS:
            raise CurationError(f"suggestion kind must be one of {', '.join(SUGGESTION_KINDS)}, got {suggestion!r}")
        if not isinstance(units, (list, tuple)):
            raise CurationError(f"units of a suggestion must be a list, got {units!r}")
        self.suggestion = suggestion
        self.units = sorted({as_int(u, "unit") for u in units})
        if len(self.units) != UNIT_COUNT[suggestion]:
            raise CurationError(f"a {suggestion} suggestion must name {UNIT_COUNT[suggestion]} distinct unit(s), "
                                f"got {self.units}")
        if not isinstance(members, str) or len(members) != 16:
            raise CurationError(f"events digest must be 16 hex digits, got {members!r}")
        self.members = members

    @classmethod
    def of(cls, sorting: Sorting, suggestion: str, units: Iterable[int]) -> "DismissSuggestion":
        """The rejection of a suggestion about ``units`` as they are now."""
        units = sorted(int(u) for u in units)
        return cls(suggestion, units, members_digest(sorting, units))

    @property
    def key(self) -> str:
        return suggestion_key(self.suggestion, self.units, self.members)

    @property
    def text(self) -> str:
        s = "s" if len(self.units) > 1 else ""
        return f"Reject {self.suggestion} suggestion for unit{s} {', '.join(map(str, self.units))}"

    def _compute(self, sorting: Sorting) -> Delta:
        for u in self.units:
            sorting.unit(u)
        if members_digest(sorting, self.units) != self.members:
            raise CurationError(f"rejected suggestion must be about units {self.units} as they are, got units "
                                f"whose events have changed since")
        return make_delta(sorting, np.zeros(0, np.int64), np.zeros(0, np.int32), {})

    def _params(self) -> dict[str, Any]:
        return {"suggestion": self.suggestion, "units": self.units, "members": self.members}


def dismissed_keys(entries: Iterable[dict[str, Any]]) -> set[str]:
    """Keys of the rejections in force in a journal: rejection steps done and not undone."""
    active: dict[int, bool] = {}
    records: dict[int, dict] = {}
    for e in entries:
        if e["action"] == "do":
            op = e["op"]
            if op.get("op") == DismissSuggestion.kind:
                records[e["seq"]] = op
                active[e["seq"]] = True
        elif e.get("ref") in records:
            active[e["ref"]] = e["action"] == "redo"
    return {suggestion_key(r["suggestion"], r["units"], r["members"]) for s, r in records.items() if active[s]}
