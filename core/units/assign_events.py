"""One curation step that puts chosen events into several existing units at once.

The overlap pass of ``sort`` (:mod:`rigside.core.signal.overlaps`) ends with it: the events it
recovered join the units whose templates they match, as one journaled, undoable step after the
first pass (so replaying the journal gives the same sorting, and undoing it leaves them in no unit).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from rigside.core.errors import CurationError
from rigside.core.units.operation_base import (
    Operation,
    as_int,
    check_events,
    decode_indices,
    encode_indices,
    make_delta,
)
from rigside.core.units.sorting import NO_UNIT, Delta, Sorting


class AssignEvents(Operation):
    """Events go to the given existing units of their own groups (``moves``: unit id -> event indices)."""

    kind = "assign_events"

    def __init__(self, moves: dict[int, np.ndarray] | None, *, encoded: list | None = None) -> None:
        super().__init__()
        self._encoded = encoded
        self.moves = None if moves is None else {
            as_int(u, "target unit"): np.unique(np.asarray(ev, dtype=np.int64)) for u, ev in moves.items()}
        if (self.moves is None and not isinstance(encoded, list)) or self.moves == {}:
            raise CurationError("events to assign must be given for at least one unit, got none")

    @property
    def text(self) -> str:
        n = "" if self.moves is None else f" {sum(len(e) for e in self.moves.values())}"
        k = "" if self.moves is None else f" {len(self.moves)}"
        return f"Assign{n} events to{k} units after the overlap pass"

    def _decode(self, n_events: int) -> dict[int, np.ndarray]:
        out = {}
        for pair in self._encoded:
            if not (isinstance(pair, list) and len(pair) == 2):
                raise CurationError(f"assignment must be a [unit, events] pair, got {str(pair)[:40]!r}")
            out[as_int(pair[0], "target unit")] = decode_indices(pair[1], n_events)
        return out

    def _compute(self, sorting: Sorting) -> Delta:
        n = len(sorting.data)
        if self.moves is None:
            self.moves = self._decode(n)
        rows, ids = [], []
        for unit, events in self.moves.items():
            check_events(events, n)
            if unit == NO_UNIT or np.any(sorting.data.group[events] != sorting.unit(unit).group):
                raise CurationError(f"events to assign must belong to the group of their existing unit, "
                                    f"got unit {unit} for events of other groups")
            rows.append(events)
            ids.append(np.full(len(events), unit, dtype=np.int32))
        rows_all = np.concatenate(rows)
        if len(np.unique(rows_all)) != len(rows_all):
            raise CurationError("events to assign must each go to one unit, got an event for two units")
        return make_delta(sorting, rows_all, np.concatenate(ids), {})

    def _params(self) -> dict[str, Any]:
        if self.moves is None:
            return {"moves": self._encoded}
        return {"moves": [[u, encode_indices(e)] for u, e in sorted(self.moves.items())]}

    @classmethod
    def _from_params(cls, p: dict[str, Any]) -> "AssignEvents":
        moves = p.pop("moves")
        if p:
            raise TypeError(f"unexpected keys {sorted(p)}")
        if not isinstance(moves, list) or not moves:
            raise CurationError(f"assignments must be a non-empty list, got {str(moves)[:40]!r}")
        return cls(None, encoded=moves)
