"""Curation operations on a :class:`rigside.core.units.sorting.Sorting`, each exactly undoable.

Every operation is an object with ``do(sorting)`` / ``undo(sorting)``, a ``text`` for menus
(e.g. "Merge units 3, 5"), and ``to_record()`` / ``from_record()`` for the journal (see
:mod:`rigside.core.units.operation_base` for the mechanism).

Rules kept by every operation: an event only joins units of its own channel group; a unit
that keeps its id keeps its label and note; new units are "unreviewed"; new ids come from
the sorting's counter, so replaying the same operations gives the same ids.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from rigside.core.errors import CurationError, ParamError
from rigside.core.progress import CancelFn, ProgressFn
from rigside.core.units.assign_events import AssignEvents
from rigside.core.units.clustering import ClusterParams, cluster_features, first_pass_assignments, unit_two_parts
from rigside.core.units.dismissals import DismissSuggestion
from rigside.core.units.operation_base import (
    MAX_NOTE_CHARS,
    Operation,
    as_int,
    check_events,
    decode_indices,
    encode_indices,
    make_delta,
)
from rigside.core.units.polygon import check_polygon, points_in_polygon
from rigside.core.units.sorting import LABELS, NO_UNIT, Delta, Sorting, Unit

BEFORE_FRAGMENT_RULE = {"min_unit_events": 1, "min_unit_share": 0.0, "split_test": False}
"""Settings that replay a record written before the fragment rule and the split test as it ran then."""
BEFORE_SPLIT_FRAGMENTS = {"split_fragments": False}
"""... and one written before split parts too small to be units went by the fragment rule."""


def _cluster_params(data: Any) -> ClusterParams:
    """Clustering settings from a journal record; bad values are a refused step."""
    try:
        if isinstance(data, dict) and "min_unit_events" not in data:
            data = {**BEFORE_FRAGMENT_RULE, **data}
        if isinstance(data, dict) and "split_fragments" not in data:
            data = {**BEFORE_SPLIT_FRAGMENTS, **data}
        if isinstance(data, dict) and "split_gap_p" not in data:   # before the gap test: no veto, one limit
            data = {"split_gap_p": 0.0, "split_overlap": data.get("merge_overlap", ClusterParams.merge_overlap), **data}
        return ClusterParams.from_dict(data)
    except ParamError as exc:
        raise CurationError(str(exc)) from None

class ClusterGroups(Operation):
    """Cluster channel groups afresh (all groups: the first pass), replacing their units; the groups'
    events recovered by the overlap pass take no part and go to no unit."""

    kind = "cluster_groups"

    def __init__(self, params: ClusterParams | None = None, groups: list[int] | None = None,
                 progress: ProgressFn = None, cancel: CancelFn = None, workers: int = 1) -> None:
        super().__init__()
        self.params = ClusterParams.from_dict((params or ClusterParams()).to_dict())
        self.groups = None if groups is None else sorted({as_int(g, "group") for g in groups})
        self.progress, self.cancel = progress, cancel
        self.workers = workers  # how the work is spread, not what it gives: not journaled

    @property
    def text(self) -> str:
        if self.groups is None:
            return "First-pass clustering"
        k = f" into {self.params.k}" if self.params.k is not None else ""
        return f"Recluster group{'s' if len(self.groups) > 1 else ''} {', '.join(map(str, self.groups))}{k}"

    def _compute(self, sorting: Sorting) -> Delta:
        d = sorting.data
        # recovered events take no part: the clusters of the detected events stay what they were
        y_column = d.feature_names.index("y_um") if "y_um" in d.feature_names else None  # probes: by region
        new, unit_group = first_pass_assignments(d.group, d.artefact | d.recovered, d.features, d.amplitude_uv,
                                                 self.params, self.groups, sorting.next_id,
                                                 self.progress, self.cancel, self.workers, d.channel,
                                                 d.time_s, y_column)
        todo = np.unique(d.group) if self.groups is None else np.asarray(self.groups)
        rows = np.flatnonzero(np.isin(d.group, todo))
        units_after: dict[int, Unit | None] = {u: None for u, rec in sorting.units.items()
                                               if rec.group in set(todo.tolist())}
        units_after.update({u: Unit(group=g) for u, g in unit_group.items()})
        return make_delta(sorting, rows, new[rows], units_after, tuple(sorted(unit_group)))

    def _params(self) -> dict[str, Any]:
        return {"params": self.params.to_dict(), "groups": self.groups}

    @classmethod
    def _from_params(cls, p: dict[str, Any]) -> "ClusterGroups":
        params = _cluster_params(p.pop("params"))
        groups = p.pop("groups")
        if groups is not None and not isinstance(groups, list):
            raise CurationError(f"groups must be a list or null, got {groups!r}")
        if p:
            raise TypeError(f"unexpected keys {sorted(p)}")
        return cls(params, groups)


class SplitByPolygon(Operation):
    """Events of a unit inside a polygon drawn on two axes go to a new unit."""

    kind = "split_polygon"

    def __init__(self, unit: int, x_axis: str, y_axis: str, vertices: list[list[float]]) -> None:
        super().__init__()
        self.unit = as_int(unit, "unit")
        self.x_axis, self.y_axis = str(x_axis), str(y_axis)
        self.vertices = check_polygon(vertices)

    @property
    def text(self) -> str:
        return f"Split unit {self.unit} by polygon"

    def _compute(self, sorting: Sorting) -> Delta:
        rec = sorting.unit(self.unit)
        idx = sorting.events_of(self.unit)
        inside = points_in_polygon(sorting.data.axis_values(self.x_axis, idx),
                                   sorting.data.axis_values(self.y_axis, idx), self.vertices)
        n_in = int(inside.sum())
        if n_in == 0 or n_in == len(idx):
            raise CurationError(f"polygon must enclose some but not all events of unit {self.unit}, "
                                f"got {n_in} of {len(idx)}")
        new = sorting.next_id
        return make_delta(sorting, idx[inside], new, {new: Unit(group=rec.group)}, (new,))

    def _params(self) -> dict[str, Any]:
        return {"unit": self.unit, "x_axis": self.x_axis, "y_axis": self.y_axis,
                "vertices": self.vertices.tolist()}


class MergeUnits(Operation):
    """Several units of one group become the one with the smallest id.

    The merged unit keeps its label if all merged units share it, else becomes "unreviewed";
    the distinct non-empty notes are joined with " | ".
    """

    kind = "merge"

    def __init__(self, units: list[int]) -> None:
        super().__init__()
        if not isinstance(units, (list, tuple)):
            raise CurationError(f"units to merge must be a list, got {units!r}")
        self.units = sorted({as_int(u, "unit") for u in units})
        if len(self.units) < 2:
            raise CurationError(f"units to merge must be at least two distinct units, got {self.units}")

    @property
    def text(self) -> str:
        return f"Merge units {', '.join(map(str, self.units))}"

    def _compute(self, sorting: Sorting) -> Delta:
        recs = [sorting.unit(u) for u in self.units]
        groups = sorted({r.group for r in recs})
        if len(groups) > 1:
            raise CurationError(f"units to merge must belong to one channel group, got groups "
                                f"{', '.join(map(str, groups))}")
        target, others = self.units[0], self.units[1:]
        labels = {r.label for r in recs}
        notes = list(dict.fromkeys(r.note for r in recs if r.note))
        merged = Unit(group=groups[0], label=labels.pop() if len(labels) == 1 else "unreviewed",
                      note=" | ".join(notes))
        rows = np.concatenate([sorting.events_of(u) for u in others])
        units_after: dict[int, Unit | None] = {target: merged, **{u: None for u in others}}
        return make_delta(sorting, rows, target, units_after)

    def _params(self) -> dict[str, Any]:
        return {"units": self.units}


class MoveEvents(Operation):
    """Selected events go to an existing unit, a new unit (``target=None``) or no unit (-1)."""

    kind = "move_events"

    def __init__(self, events: np.ndarray | None, target: int | None, *, encoded: str | None = None) -> None:
        super().__init__()
        self.target = None if target is None else as_int(target, "target unit")
        self._encoded = encoded
        self.events = None if events is None else np.unique(np.asarray(events, dtype=np.int64))
        if self.events is None and encoded is None:
            raise CurationError("events to move must be given, got none")

    @property
    def text(self) -> str:
        n = len(self.events) if self.events is not None else "selected"
        dest = ("a new unit" if self.target is None else "no unit" if self.target == NO_UNIT
                else f"unit {self.target}")
        return f"Move {n} events to {dest}"

    def _compute(self, sorting: Sorting) -> Delta:
        n = len(sorting.data)
        if self.events is None:
            self.events = decode_indices(self._encoded, n)
        check_events(self.events, n)
        groups = np.unique(sorting.data.group[self.events])
        if self.target != NO_UNIT and len(groups) != 1:
            raise CurationError(f"events to move must come from one channel group, got groups "
                                f"{', '.join(map(str, groups[:8]))}")
        if self.target is None:
            new = sorting.next_id
            return make_delta(sorting, self.events, new, {new: Unit(group=int(groups[0]))}, (new,))
        if self.target != NO_UNIT and sorting.unit(self.target).group != groups[0]:
            raise CurationError(f"target unit must belong to the events' group {groups[0]}, got unit "
                                f"{self.target} of group {sorting.unit(self.target).group}")
        if np.all(sorting.assignments[self.events] == self.target):
            raise CurationError(f"events to move must not all be in unit {self.target} already, "
                                f"got {len(self.events)} events there")
        return make_delta(sorting, self.events, self.target, {})

    def _params(self) -> dict[str, Any]:
        enc = self._encoded if self.events is None else encode_indices(self.events)
        return {"events": enc, "target": self.target}

    @classmethod
    def _from_params(cls, p: dict[str, Any]) -> "MoveEvents":
        target, encoded = p.pop("target"), p.pop("events")
        if p:
            raise TypeError(f"unexpected keys {sorted(p)}")
        return cls(None, target, encoded=encoded)


def _parts_delta(sorting: Sorting, unit: int, idx: np.ndarray, labels: np.ndarray, n_parts: int) -> Delta:
    """A unit's events ``idx`` in ``n_parts`` parts (``labels``): the part with the largest mean peak
    magnitude keeps the unit's id, the others become new units of its group."""
    group = sorting.unit(unit).group
    mag = np.bincount(labels, np.abs(sorting.data.amplitude_uv[idx].astype(np.float64)), n_parts)
    mag /= np.bincount(labels, minlength=n_parts)
    rank = np.empty(n_parts, dtype=np.int64)
    rank[np.argsort(-mag, kind="stable")] = np.arange(n_parts)
    new_ids = sorting.next_id + np.arange(n_parts - 1)
    ids = np.concatenate([[unit], new_ids]).astype(np.int32)
    created = tuple(int(u) for u in new_ids)
    return make_delta(sorting, idx, ids[rank[labels]], {u: Unit(group=group) for u in created}, created)


class SplitInTwo(Operation):
    """One unit's events in the two parts of the first pass's split test (:func:`unit_two_parts`,
    seeded by the unit id), whatever the test's verdict: what accepting a split suggestion does,
    so the parts are the ones its evidence was computed on. The part with the larger mean peak
    magnitude keeps the unit's id."""

    kind = "split_in_two"

    def __init__(self, unit: int, params: ClusterParams | None = None) -> None:
        super().__init__()
        self.unit = as_int(unit, "unit")
        self.params = ClusterParams.from_dict((params or ClusterParams()).to_dict())

    @property
    def text(self) -> str:
        return f"Split unit {self.unit} in two"

    def _compute(self, sorting: Sorting) -> Delta:
        sorting.unit(self.unit)     # an unknown unit is refused by name
        idx = sorting.events_of(self.unit)
        channel = None if sorting.data.channel is None else sorting.data.channel[idx]
        test = unit_two_parts(sorting.data.features[idx], channel, self.params, stream=self.unit)
        k = 0 if test is None else int(test.second.sum())
        if not 0 < k < len(idx):
            raise CurationError(f"unit {self.unit} must fall into 2 parts to be split in two, got 1")
        return _parts_delta(sorting, self.unit, idx, test.second.astype(np.int64), 2)

    def _params(self) -> dict[str, Any]:
        return {"unit": self.unit, "params": self.params.to_dict()}

    @classmethod
    def _from_params(cls, p: dict[str, Any]) -> "SplitInTwo":
        return cls(params=_cluster_params(p.pop("params")), **p)


class ReclusterUnit(Operation):
    """Cluster one unit's events again into ``k`` parts (``None``: chosen by BIC).

    The part with the largest mean peak magnitude keeps the unit's id; the others are new.
    """

    kind = "recluster"

    def __init__(self, unit: int, k: int | None = None, params: ClusterParams | None = None) -> None:
        super().__init__()
        self.unit = as_int(unit, "unit")
        if k is not None and (as_int(k, "part count") < 2):
            raise CurationError(f"part count must be at least 2, got {k}")
        self.k = k
        self.params = ClusterParams.from_dict((params or ClusterParams()).to_dict())

    @property
    def text(self) -> str:
        return f"Recluster unit {self.unit}" + (f" into {self.k}" if self.k else "")

    def _compute(self, sorting: Sorting) -> Delta:
        sorting.unit(self.unit)     # an unknown unit is refused by name
        idx = sorting.events_of(self.unit)
        labels = cluster_features(sorting.data.features[idx], self.params, stream=self.unit, k=self.k)
        n_parts = int(labels.max()) + 1 if len(labels) else 0
        if n_parts < 2:
            raise CurationError(f"unit {self.unit} must fall into at least 2 parts to be reclustered, "
                                f"got {n_parts}")
        return _parts_delta(sorting, self.unit, idx, labels, n_parts)

    def _params(self) -> dict[str, Any]:
        return {"unit": self.unit, "k": self.k, "params": self.params.to_dict()}

    @classmethod
    def _from_params(cls, p: dict[str, Any]) -> "ReclusterUnit":
        params = _cluster_params(p.pop("params"))
        return cls(params=params, **p)


class Relabel(Operation):
    """Give units a label (units already carrying it are left out)."""

    kind = "relabel"

    def __init__(self, units: list[int], label: str) -> None:
        super().__init__()
        if not isinstance(units, (list, tuple)) or not units:
            raise CurationError(f"units to label must be a non-empty list, got {units!r}")
        self.units = sorted({as_int(u, "unit") for u in units})
        if label not in LABELS:
            raise CurationError(f"unit label must be one of {', '.join(LABELS)}, got {label!r}")
        self.label = label

    @property
    def text(self) -> str:
        s = "s" if len(self.units) > 1 else ""
        return f"Label unit{s} {', '.join(map(str, self.units))} as {self.label}"

    def _compute(self, sorting: Sorting) -> Delta:
        after = {u: sorting.with_unit(u, label=self.label) for u in self.units
                 if sorting.unit(u).label != self.label}
        if not after:
            raise CurationError(f"label must differ from the units' current label, got {self.label!r}")
        return make_delta(sorting, np.zeros(0, np.int64), np.zeros(0, np.int32), after)

    def _params(self) -> dict[str, Any]:
        return {"units": self.units, "label": self.label}


class SetNote(Operation):
    """Replace a unit's free-text note."""

    kind = "note"

    def __init__(self, unit: int, note: str) -> None:
        super().__init__()
        self.unit = as_int(unit, "unit")
        if not isinstance(note, str) or len(note) > MAX_NOTE_CHARS:
            raise CurationError(f"note must be text of at most {MAX_NOTE_CHARS} characters, got "
                                f"{type(note).__name__} of length {len(note) if isinstance(note, str) else '-'}")
        self.note = note

    @property
    def text(self) -> str:
        return f"Note on unit {self.unit}"

    def _compute(self, sorting: Sorting) -> Delta:
        if sorting.unit(self.unit).note == self.note:
            raise CurationError(f"note must differ from the current note of unit {self.unit}, got the same text")
        return make_delta(sorting, np.zeros(0, np.int64), np.zeros(0, np.int32),
                      {self.unit: sorting.with_unit(self.unit, note=self.note)})

    def _params(self) -> dict[str, Any]:
        return {"unit": self.unit, "note": self.note}


OPERATIONS: dict[str, type[Operation]] = {c.kind: c for c in (
    ClusterGroups, SplitByPolygon, MergeUnits, MoveEvents, ReclusterUnit, SplitInTwo, Relabel, SetNote,
    DismissSuggestion, AssignEvents)}


def operation_from_record(rec: Any) -> Operation:
    """Rebuild any operation from its journal record (:class:`CurationError` if malformed)."""
    if not isinstance(rec, dict) or rec.get("op") not in OPERATIONS:
        raise CurationError(f"journal record must name one of the operations {', '.join(OPERATIONS)}, "
                            f"got {str(rec)[:80]!r}")
    return OPERATIONS[rec["op"]].from_record(rec)
