"""The sorting model: which unit every event belongs to, and what each unit is.

The model changes only through :meth:`Sorting.apply` of a :class:`Delta` (built by the
operations in :mod:`rigside.core.units.operations`), so every change can be undone exactly and is
announced once, with the units it touched, on :attr:`Sorting.changed`.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Sequence

import numpy as np

from rigside.core.errors import CurationError, RigsideError
from rigside.core.events import EventTable
from rigside.core.notify import Signal
from rigside.core.units.journal import Journal

NO_UNIT = -1
"""Unit id of events that belong to no unit (artefacts, or events moved out of every unit)."""

LABELS = ("unreviewed", "single unit", "multi-unit", "not neural")
"""Allowed unit labels, in menu order; every unit starts "unreviewed"."""

MAX_UNIT_ID = 2**31 - 2
"""Unit ids are int32 and positive."""

POOL_BASE = -2
"""Pool ids count down from here: :func:`pool_id` of group 0 is -2, of group 1 is -3, ..."""

AXIS_TIME = "event:time_s"
AXIS_AMPLITUDE = "event:amplitude_uv"
FEATURE_AXIS_PREFIX = "feature:"


def groups_of(assignments: np.ndarray, ids: np.ndarray, groups: np.ndarray) -> np.ndarray:
    """The channel group of each event's unit (int32): ``groups[k]`` for unit ``ids[k]`` (sorted,
    unique), -1 for events in no unit, -2 for ids not in ``ids``.

    A look-up table by id when the largest id is not far above the number of events (unit ids
    are), else a binary search; both give the same groups.
    """
    a = np.asarray(assignments)
    lo, hi = (int(a.min()), int(a.max())) if len(a) else (NO_UNIT, NO_UNIT)
    if lo >= NO_UNIT and hi <= 4 * len(a) + (1 << 16):
        table = np.full(hi + 2, -2, dtype=np.int32)
        table[0] = -1
        inside = ids <= hi
        table[ids[inside] + 1] = groups[inside]
        return table[a + 1]
    if not len(ids):
        return np.where(a == NO_UNIT, -1, -2).astype(np.int32)
    pos = np.minimum(np.searchsorted(ids, a), len(ids) - 1)
    return np.where(ids[pos] == a, groups[pos], np.where(a == NO_UNIT, -1, -2)).astype(np.int32)


def pool_id(group: int) -> int:
    """The id naming a group's unassigned pool (its events in no unit, artefacts excluded).

    Pool ids are negative and never stored in the assignments; :meth:`Sorting.events_of` and
    :meth:`Sorting.group_of` accept them, so a view can show a pool as it shows a unit.
    """
    return POOL_BASE - int(group)


def pool_group(unit_id: int) -> int | None:
    """The group whose pool ``unit_id`` names, or None for a unit id (or :data:`NO_UNIT`)."""
    return None if int(unit_id) > POOL_BASE else POOL_BASE - int(unit_id)


@dataclass(frozen=True)
class Unit:
    """One unit: its channel group, label and free-text note."""

    group: int
    label: str = "unreviewed"
    note: str = ""

    def __post_init__(self) -> None:
        if isinstance(self.group, bool) or not isinstance(self.group, (int, np.integer)) or self.group < 0:
            raise CurationError(f"unit group must be a non-negative integer, got {self.group!r}")
        if self.label not in LABELS:
            raise CurationError(f"unit label must be one of {', '.join(LABELS)}, got {self.label!r}")
        if not isinstance(self.note, str):
            raise CurationError(f"unit note must be text, got {type(self.note).__name__}")


@dataclass(frozen=True, eq=False)
class SortingState:
    """A sorting's assignments (read-only), unit table and id counter at one moment."""

    assignments: np.ndarray
    units: dict[int, Unit]
    next_id: int


@dataclass(frozen=True)
class Change:
    """What one applied delta touched (unit ids; :data:`NO_UNIT` stands for "in no unit")."""

    added: frozenset[int]
    removed: frozenset[int]
    members: frozenset[int]
    edited: frozenset[int]

    @property
    def touched(self) -> frozenset[int]:
        """Every unit id whose events, record or existence changed."""
        return self.added | self.removed | self.members | self.edited


@dataclass
class Delta:
    """An exact, reversible change of the model: new values and the values they replace.

    ``index`` holds the events whose unit changes (sorted, int64), ``before``/``after`` their
    unit ids; ``units_before``/``units_after`` map every touched unit id to its record or
    ``None`` (absent).
    """

    index: np.ndarray
    before: np.ndarray
    after: np.ndarray
    units_before: dict[int, Unit | None]
    units_after: dict[int, Unit | None]
    next_id_before: int
    next_id_after: int
    created: tuple[int, ...] = field(default=())


class SortingData:
    """Read-only per-event inputs of a sorting: features, times, peaks, groups, artefacts, which
    events the overlap pass recovered (``recovered``; all False without it) and main (detection)
    channels (``channel`` None when unknown: the first pass then splits on the features alone)."""

    def __init__(self, features: np.ndarray, feature_names: Sequence[str], time_s: np.ndarray,
                 amplitude_uv: np.ndarray, group: np.ndarray, artefact: np.ndarray,
                 recovered: np.ndarray | None = None, channel: np.ndarray | None = None) -> None:
        self.features = _frozen(np.asarray(features, dtype=np.float32))
        self.feature_names = tuple(str(n) for n in feature_names)
        n = len(self.features)
        if self.features.ndim != 2 or len(self.feature_names) != self.features.shape[1]:
            raise RigsideError(f"features must be a matrix with one name per column, got shape "
                               f"{self.features.shape} and {len(self.feature_names)} names")
        if len(set(self.feature_names)) != len(self.feature_names):
            raise RigsideError(f"feature names must be unique, got {list(self.feature_names)}")
        self.time_s = _frozen(np.asarray(time_s, dtype=np.float64))
        self.amplitude_uv = _frozen(np.asarray(amplitude_uv, dtype=np.float32))
        self.group = _frozen(np.asarray(group, dtype=np.int32))
        self.artefact = _frozen(np.asarray(artefact, dtype=np.bool_))
        self.recovered = _frozen(np.zeros(n, dtype=np.bool_) if recovered is None
                                 else np.asarray(recovered, dtype=np.bool_))
        self.channel = None if channel is None else _frozen(np.asarray(channel, dtype=np.int32))
        lengths = {len(self.time_s), len(self.amplitude_uv), len(self.group), len(self.artefact),
                   len(self.recovered)} | (set() if self.channel is None else {len(self.channel)})
        if lengths != {n}:
            raise RigsideError(f"features and event columns must have one row per event ({n}), got "
                               f"lengths {sorted(lengths)}")
        self._columns = {AXIS_TIME: self.time_s, AXIS_AMPLITUDE: self.amplitude_uv}
        for i, name in enumerate(self.feature_names):
            self._columns[FEATURE_AXIS_PREFIX + name] = self.features[:, i]

    @classmethod
    def from_events(cls, events: EventTable, features: np.ndarray, feature_names: Sequence[str]
                    ) -> "SortingData":
        """Inputs from an event table and its feature matrix."""
        return cls(features, feature_names, events.time_s, events.amplitude_uv, events.group,
                   events.artefact, recovered=events.recovered, channel=events.channel)

    def __len__(self) -> int:
        return len(self.group)

    @property
    def axes(self) -> tuple[str, ...]:
        """Names accepted by :meth:`axis_values`: the time, the peak and every feature."""
        return tuple(self._columns)

    def axis_values(self, axis: str, index: np.ndarray | None = None) -> np.ndarray:
        """Values of one axis (float64) for the events in ``index`` (all events if ``None``)."""
        if axis not in self._columns:
            raise CurationError(f"axis must be one of {', '.join(self._columns)}, got {axis!r}")
        col = self._columns[axis]
        return (col if index is None else col[index]).astype(np.float64)


def _frozen(a: np.ndarray) -> np.ndarray:
    a = np.ascontiguousarray(a)
    a.setflags(write=False)
    return a


class Sorting:
    """Unit id of every event (int32, :data:`NO_UNIT` for none) and the unit table.

    Attributes
    ----------
    data
        The read-only inputs (:class:`SortingData`).
    changed
        :class:`Signal` emitting one :class:`Change` after every applied delta.
    journal
        The :class:`rigside.core.units.journal.Journal` of operations applied to this sorting.
    revision
        Incremented by every applied delta (including undo).
    origin
        The :class:`SortingState` right after the journal's opening step (the first pass), kept
        so that the undo history can be rebuilt without redoing that step; None if unknown.
    """

    def __init__(self, data: SortingData, assignments: np.ndarray | None = None,
                 units: dict[int, Unit] | None = None, next_id: int = 1, journal=None) -> None:

        self.data = data
        n = len(data)
        self._assign = (np.full(n, NO_UNIT, dtype=np.int32) if assignments is None
                        else np.array(assignments, dtype=np.int32))
        self._units: dict[int, Unit] = dict(sorted((int(u), rec) for u, rec in (units or {}).items()))
        self.next_id = int(next_id)
        self.journal = journal if journal is not None else Journal()
        self.changed = Signal()
        self.revision = 0
        self.origin: SortingState | None = None
        self._members: dict[int, np.ndarray] = {}
        self.validate()

    # ---- reading --------------------------------------------------------------------------
    @property
    def assignments(self) -> np.ndarray:
        """Unit id per event (read-only view)."""
        view = self._assign.view()
        view.setflags(write=False)
        return view

    @property
    def units(self) -> dict[int, Unit]:
        """Copy of the unit table, by increasing id."""
        return dict(self._units)

    def unit(self, unit_id: int) -> Unit:
        """The record of one unit (:class:`CurationError` if absent)."""
        try:
            return self._units[int(unit_id)]
        except KeyError:
            raise CurationError(f"unit must be one of the current units, got {unit_id!r}") from None

    def unit_ids(self) -> list[int]:
        """Ids of the current units, increasing."""
        return sorted(self._units)

    def events_of(self, unit_id: int) -> np.ndarray:
        """Sorted indices (int64) of the events in a unit, or in a group's unassigned pool for a
        :func:`pool_id` (cached until the unit or the pool changes)."""
        unit_id = int(unit_id)
        idx = self._members.get(unit_id)
        if idx is None:
            g = pool_group(unit_id)
            idx = np.flatnonzero(self._assign == unit_id if g is None else
                                 (self._assign == NO_UNIT) & (self.data.group == g) & ~self.data.artefact)
            idx.setflags(write=False)
            self._members[unit_id] = idx
        return idx

    def group_of(self, unit_id: int) -> int:
        """The channel group of a unit or of a pool (:class:`CurationError` if neither)."""
        g = pool_group(unit_id)
        return self.unit(unit_id).group if g is None else g

    def pool_counts(self) -> dict[int, int]:
        """Events in each group's unassigned pool (in no unit, artefacts excluded), for the groups
        with some, by increasing group."""
        free = self.data.group[(self._assign == NO_UNIT) & ~self.data.artefact]
        c = np.bincount(free) if len(free) else np.zeros(0, dtype=np.int64)
        return {int(g): int(n) for g, n in enumerate(c) if n}

    def counts(self) -> dict[int, int]:
        """Event count of every unit."""
        ids = np.asarray(self.unit_ids(), dtype=np.int64)
        assigned = self._assign[self._assign != NO_UNIT]
        c = np.bincount(np.searchsorted(ids, assigned), minlength=len(ids)) if len(ids) else []
        return {int(u): int(n) for u, n in zip(ids, c)}

    def validate(self) -> None:
        """Check that ids are known, belong to their unit's group, and the id counter is ahead."""
        if len(self._assign) != len(self.data):
            raise CurationError(f"assignments must have one entry per event ({len(self.data)}), "
                                f"got {len(self._assign)}")
        if not 1 <= self.next_id <= MAX_UNIT_ID + 1:
            raise CurationError(f"next unit id must be from 1 to {MAX_UNIT_ID + 1}, got {self.next_id}")
        for u, rec in self._units.items():
            if not isinstance(rec, Unit) or not 1 <= u < self.next_id:
                raise CurationError(f"unit table must map ids from 1 to below {self.next_id} to units, "
                                    f"got {u!r}: {type(rec).__name__}")
        ids = np.asarray(self.unit_ids(), dtype=np.int64)
        groups = np.asarray([self._units[int(u)].group for u in ids], dtype=np.int64)
        found = groups_of(self._assign, ids, groups)
        unknown = found == -2
        if unknown.any():
            raise CurationError(f"assigned unit ids must be in the unit table, got unknown ids "
                                f"{np.unique(self._assign[unknown])[:10].tolist()}")
        wrong = (found != self.data.group) & (found >= 0)
        if wrong.any():
            first = int(np.argmax(wrong))
            raise CurationError(f"events must belong to units of their own channel group, got event "
                                f"{first} of group {int(self.data.group[first])} in unit "
                                f"{int(self._assign[first])}")

    def copy(self) -> "Sorting":
        """An independent copy (same read-only data; assignments, units and journal copied),
        e.g. for saving on a worker thread while curation goes on."""
        twin = Sorting(self.data, self._assign, self._units, self.next_id, type(self.journal)(self.journal.entries))
        twin.origin = self.origin
        return twin

    def state(self) -> SortingState:
        """The current assignments (a read-only copy), unit table and id counter."""
        return SortingState(_frozen(self._assign.copy()), dict(self._units), self.next_id)

    @classmethod
    def from_state(cls, data: SortingData, state: SortingState, journal=None) -> "Sorting":
        """A sorting of ``data`` in ``state`` (validated)."""
        return cls(data, state.assignments, state.units, state.next_id, journal)

    def state_equal(self, other: "Sorting") -> bool:
        """Same assignments (bitwise), unit table and id counter."""
        return (np.array_equal(self._assign, other._assign) and self._assign.dtype == other._assign.dtype
                and self._units == other._units and self.next_id == other.next_id)

    # ---- changing -------------------------------------------------------------------------
    def apply(self, delta: Delta, forward: bool = True) -> Change:
        """Apply a delta (or revert it when ``forward`` is False) and announce the change."""
        values = delta.after if forward else delta.before
        old_values = delta.before if forward else delta.after
        units_new = delta.units_after if forward else delta.units_before
        units_old = delta.units_before if forward else delta.units_after
        next_old = delta.next_id_before if forward else delta.next_id_after
        if (not np.array_equal(self._assign[delta.index], old_values) or self.next_id != next_old
                or any(self._units.get(u) != rec for u, rec in units_old.items())):
            raise CurationError("sorting must be in the state the step was computed for, got another "
                                "state (steps applied out of order?)")
        self._assign[delta.index] = values
        for u, rec in units_new.items():
            if rec is None:
                self._units.pop(u, None)
            else:
                self._units[u] = rec
        self._units = dict(sorted(self._units.items()))
        self.next_id = delta.next_id_after if forward else delta.next_id_before
        members = frozenset(int(u) for u in np.unique(np.concatenate([values, old_values])))
        for u in members | set(units_new):
            self._members.pop(u, None)
        if NO_UNIT in members:
            for u in [u for u in self._members if pool_group(u) is not None]:
                del self._members[u]
        added = frozenset(u for u in units_new if units_old.get(u) is None and units_new[u] is not None)
        removed = frozenset(u for u in units_new if units_old.get(u) is not None and units_new[u] is None)
        edited = frozenset(u for u in units_new if units_old.get(u) is not None
                           and units_new[u] is not None and units_old[u] != units_new[u])
        change = Change(added=added, removed=removed, members=members, edited=edited)
        self.revision += 1
        self.changed.emit(change)
        return change

    def with_unit(self, unit_id: int, **changes) -> Unit:
        """The record of ``unit_id`` with some fields replaced (validated, not applied)."""
        return replace(self.unit(unit_id), **changes)
