"""Base of the curation operations: exact deltas, journal records, compact event lists.

The first ``do`` of an operation (or an explicit ``prepare``, which may run on a worker
thread) computes a :class:`rigside.core.units.sorting.Delta` holding only the changed events and unit
records; ``undo`` writes the old values back and a later ``do`` (redo) writes the new ones
again, so both are bitwise exact and cost time in proportion to the events changed.
"""

from __future__ import annotations

import base64
import zlib
from typing import Any, ClassVar

import numpy as np

from rigside.core.errors import CurationError
from rigside.core.units.sorting import MAX_UNIT_ID, Delta, Sorting, Unit

MAX_NOTE_CHARS = 20_000


def encode_indices(index: np.ndarray) -> str:
    """Sorted unique event indices as text: zlib-compressed little-endian int64 steps, base64."""
    steps = np.diff(np.asarray(index, dtype=np.int64), prepend=0).astype("<i8")
    return base64.b64encode(zlib.compress(steps.tobytes(), 6)).decode("ascii")


def decode_indices(text: str, n_events: int) -> np.ndarray:
    """Inverse of :func:`encode_indices`, refusing anything that is not sorted indices below ``n_events``."""
    if not isinstance(text, str):
        raise CurationError(f"event list must be encoded text, got {type(text).__name__}")
    try:
        packed = base64.b64decode(text.encode("ascii"), validate=True)
        d = zlib.decompressobj()
        raw = d.decompress(packed, 8 * n_events + 8)
        if d.unconsumed_tail or not d.eof:
            raise CurationError(f"event list must hold at most {n_events} events, got more or a truncated list")
    except (ValueError, zlib.error) as exc:
        raise CurationError(f"event list must be base64 zlib data, got undecodable text ({exc})") from None
    if len(raw) % 8:
        raise CurationError(f"event list must hold whole 8-byte steps, got {len(raw)} bytes")
    idx = np.cumsum(np.frombuffer(raw, dtype="<i8").astype(np.int64))
    check_events(idx, n_events)
    return idx


def check_events(idx: np.ndarray, n_events: int) -> None:
    """Refuse an event selection that is empty, unsorted, repeated or out of range."""
    if len(idx) == 0:
        raise CurationError("event selection must hold at least one event, got none")
    if idx[0] < 0 or idx[-1] >= n_events or (len(idx) > 1 and np.any(np.diff(idx) <= 0)):
        raise CurationError(f"event selection must hold distinct indices from 0 to {n_events - 1}, "
                            f"got values from {int(idx.min())} to {int(idx.max())}")


def as_int(value: Any, what: str) -> int:
    """An integer parameter (bool, float and text refused, as journals may be hostile)."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise CurationError(f"{what} must be an integer, got {value!r}")
    return int(value)


def make_delta(sorting: Sorting, rows: np.ndarray, new_ids: np.ndarray, units_after: dict[int, Unit | None],
               created: tuple[int, ...] = ()) -> Delta:
    """A delta holding only the events whose unit really changes."""
    if sorting.next_id + len(created) > MAX_UNIT_ID + 1:
        raise CurationError(f"unit ids must stay below {MAX_UNIT_ID + 1}, got a request for {len(created)} more")
    rows = np.asarray(rows, dtype=np.int64)
    new_ids = np.broadcast_to(np.asarray(new_ids, dtype=np.int32), rows.shape)
    old = sorting.assignments[rows]
    moved = old != new_ids
    order = np.argsort(rows[moved], kind="stable")
    current = sorting.units
    return Delta(index=rows[moved][order], before=old[moved][order], after=new_ids[moved][order].copy(),
                 units_before={u: current.get(u) for u in units_after}, units_after=dict(units_after),
                 next_id_before=sorting.next_id, next_id_after=sorting.next_id + len(created),
                 created=created)


class Operation:
    """Base of all curation operations (see the module docstring)."""

    kind: ClassVar[str] = ""

    def __init__(self) -> None:
        self._delta: Delta | None = None
        self._prepared_at = -1
        self._final = False
        self._expected_created: tuple[int, ...] | None = None
        self.journal_seq: int | None = None

    @property
    def text(self) -> str:
        """Menu text, e.g. "Merge units 3, 5"."""
        raise NotImplementedError

    def _compute(self, sorting: Sorting) -> Delta:
        raise NotImplementedError

    def _params(self) -> dict[str, Any]:
        raise NotImplementedError

    def prepare(self, sorting: Sorting) -> Delta:
        """Compute the change against the sorting's current state (no change applied)."""
        if self._delta is None or (not self._final and self._prepared_at != sorting.revision):
            delta = self._compute(sorting)
            if self._expected_created is not None and delta.created != self._expected_created:
                raise CurationError(f"replayed operation '{self.text}' must create units "
                                    f"{list(self._expected_created)}, got {list(delta.created)}")
            self._delta, self._prepared_at = delta, sorting.revision
        return self._delta

    def do(self, sorting: Sorting) -> None:
        """Apply (first time: compute then apply; later: reapply the same change)."""
        delta = self.prepare(sorting)
        self._final = True
        sorting.apply(delta, forward=True)

    def undo(self, sorting: Sorting) -> None:
        """Restore exactly the state before :meth:`do`."""
        if not self._final:
            raise CurationError(f"operation '{self.text}' must be done before it is undone")
        sorting.apply(self._delta, forward=False)

    @property
    def created(self) -> tuple[int, ...]:
        """Ids of the units this operation creates (known once prepared)."""
        return self._delta.created if self._delta is not None else ()

    def to_record(self) -> dict[str, Any]:
        """Parameters for the journal (JSON-ready)."""
        rec = {"op": self.kind, **self._params()}
        if self._final:
            rec["created"] = list(self._delta.created)
        return rec

    @classmethod
    def from_record(cls, rec: dict[str, Any]) -> "Operation":
        """Rebuild from :meth:`to_record` output (checked; :class:`CurationError` if malformed)."""
        try:
            op = cls._from_params({k: v for k, v in rec.items() if k not in ("op", "created")})
        except (TypeError, KeyError) as exc:
            raise CurationError(f"journal record of '{cls.kind}' must hold exactly its parameters, "
                                f"got a problem with {exc}") from None
        if "created" in rec:
            created = rec["created"]
            if not isinstance(created, list):
                raise CurationError(f"created units must be a list, got {created!r}")
            op._expected_created = tuple(as_int(u, "created unit id") for u in created)
        return op

    @classmethod
    def _from_params(cls, p: dict[str, Any]) -> "Operation":
        return cls(**p)
