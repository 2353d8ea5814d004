"""The sorting held by the window: clustering, curation steps, selection and quality numbers.

Long work runs on the window's job runner: the first pass and the slow steps (clustering a
group again, reclustering a unit) are prepared off the GUI thread; after every step the
quality numbers of the touched units only are recomputed off the GUI thread. Files
(save, open, autosave, recovery) are handled by :class:`app.session_flow.SessionFlow`.
"""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import QObject, Signal
from PySide6.QtGui import QUndoStack

from rigside.core.errors import RigsideError
from rigside.core.quality.metric_settings import metric_settings
from rigside.core.quality.unit_table_io import DEFAULT_LIMITS, flag_units
from rigside.core.signal.features import Features
from rigside.core.signal.pipeline import thresholds_sigma
from rigside.core.units.event_rows import MISSING, Detection, detection_at, session_rows
from rigside.core.units.history import UndoStack
from rigside.core.units.operations import (
    ClusterGroups,
    MergeUnits,
    MoveEvents,
    ReclusterUnit,
    Relabel,
    SetNote,
    SplitByPolygon,
)
from rigside.core.units.session import RecordingRef, Session
from rigside.core.units.sorting import NO_UNIT, pool_group, pool_id
from rigside.gui import palette
from rigside.gui.curation import StepCommand
from rigside.gui.jobs import first_pass_job, prepare_step_job, unit_metrics_job

SELECTION_COLOURS = (palette.GREEN, palette.ORANGE, palette.PURPLE, palette.SKY, palette.VERMILLION,
                     palette.YELLOW, palette.BLUE)
"""One colour per selected unit, in selection order (Okabe & Ito hues, colour-blind safe)."""

SLOW_STEPS = (ClusterGroups, ReclusterUnit)
CURATION_SLOT = "curation"
METRICS_SLOT = "unit_metrics"


class SortingController(QObject):
    """The window's sorting session and everything done to it.

    Qt signals: ``replacing()`` just before the held session is let go, ``sorting_replaced()``
    (a new sorting, or none), ``units_changed(change)``
    after every step, undo or redo (a :class:`rigside.core.units.sorting.Change`), ``metrics_changed()``,
    ``selection_changed()`` (units), ``events_selected()`` (events chosen by an outline), ``rows_changed()``
    (the session's events were mapped again onto the workbench's event table: ``rows``).
    """

    replacing = Signal()
    sorting_replaced = Signal()
    units_changed = Signal(object)
    metrics_changed = Signal()
    selection_changed = Signal()
    events_selected = Signal()
    rows_changed = Signal()

    def __init__(self, window):
        super().__init__(window)
        self.window = window
        self.bench = window.bench
        self.runner = window.runner
        self.session: Session | None = None
        self.undo_stack = QUndoStack(self)
        self._core_stack: UndoStack | None = None
        self.metrics: dict[int, dict] = {}
        self.limits = list(DEFAULT_LIMITS)
        self.selection: list[int] = []
        self.selected_events = np.zeros(0, dtype=np.int64)
        self._stale: dict[int, int] = {}   # unit -> sorting revision when its numbers went stale
        self.rows: np.ndarray | None = None
        """Row of the workbench's event table of each session event (see :func:`session_rows`), or None."""
        self.bench.events_changed.connect(self._update_rows)

    # ---- reading ----------------------------------------------------------------------------
    @property
    def sorting(self):
        return None if self.session is None else self.session.sorting

    @property
    def events(self):
        return None if self.session is None else self.session.events

    def unit_colour(self, unit: int):
        """Colour of a selected unit, or None when it is not selected."""
        try:
            return SELECTION_COLOURS[self.selection.index(int(unit)) % len(SELECTION_COLOURS)]
        except ValueError:
            return None

    @property
    def holds_rows(self) -> bool:
        """True when the workbench's event table holds every event of the session (``rows`` complete)."""
        return self.rows is not None and bool(np.all(self.rows != MISSING))

    def selected_rows(self) -> dict[int, np.ndarray]:
        """Rows of the workbench's event table holding each selected unit's events (sorted; events the
        table does not hold are left out), for views that colour the selected units' events."""
        if self.sorting is None or self.rows is None:
            return {}
        out = {}
        for u in self.selection:
            r = self.rows[self.sorting.events_of(u)]
            out[u] = np.sort(r[r != MISSING])
        return out

    def _update_rows(self) -> None:
        """Map the session's events onto the workbench's table (once per session and table)."""
        table = self.bench.events
        self.rows = None if self.session is None or table is None else session_rows(self.session, table)
        self.rows_changed.emit()

    def unit_name(self, unit: int) -> str:
        """"unit 7", or "unassigned in tetrode 2" for a pool id."""
        g = pool_group(unit)
        return f"unit {unit}" if g is None else f"unassigned in {self.group_name(g)}"

    def group_name(self, group: int) -> str:
        names = self.session.recording.description.get("group_names") if self.session else None
        return names[group] if isinstance(names, list) and 0 <= group < len(names) else f"group {group}"

    def thresholds(self) -> np.ndarray:
        """Per-channel detection threshold (sigma) the sorting's events were taken at."""
        return thresholds_sigma(self.session.params, self.events.sigma_uv)

    def metric_settings(self):
        return metric_settings(self.session.params)

    def flags(self) -> dict[int, set[str]]:
        """For each unit with quality numbers, the columns beyond their limits (undefined
        numbers are not marked here: they show their reason instead)."""
        ids = sorted(self.metrics)
        if not ids:
            return {}
        table = {c: np.array([self.metrics[u][c] for u in ids]) for c in {lim.column for lim in self.limits}}
        table["unit"] = np.array(ids)
        out: dict[int, set[str]] = {u: set() for u in ids}
        for lim in self.limits:
            beyond = flag_units(table, [lim])[lim.name]
            for u in np.asarray(ids)[beyond]:
                out[int(u)].add(lim.column)
        return out

    # ---- the sorting ------------------------------------------------------------------------
    def attach(self, session: Session | None, history: list | None = None,
               numbers: tuple[dict, list] | None = None) -> None:
        """Hold ``session`` (or nothing) with fresh selection and quality numbers; the undo history
        is ``history`` (steps already in the sorting, oldest first, from
        :func:`rigside.core.units.history.rebuild_history`) or empty. ``numbers`` are the stored quality
        numbers still current and the units left to compute
        (:func:`rigside.core.quality.stored_numbers.current_numbers`); without them every unit is computed."""
        old = self.sorting
        if old is not None:
            self.replacing.emit()
            old.changed.disconnect(self._on_sorting_changed)
        self.runner.cancel(METRICS_SLOT)
        self.undo_stack.clear()
        self.session = session
        self.metrics = {}
        self._stale = {}
        self.selection = []
        self.selected_events = np.zeros(0, dtype=np.int64)
        self._core_stack = None
        if session is not None:
            session.sorting.changed.connect(self._on_sorting_changed)
            self._core_stack = UndoStack(session.sorting)
            for op in history or []:
                self.undo_stack.push(StepCommand(op, self._core_stack, applied=True))
            self.undo_stack.setClean()
            rows, stale = numbers if numbers is not None else ({}, session.sorting.unit_ids())
            self.metrics = dict(rows)
            self._stale = {u: session.sorting.revision for u in stale}
            self._refresh_metrics()
        self._update_rows()
        self.sorting_replaced.emit()     # stored quality numbers are in place: no metrics_changed for them
        self.selection_changed.emit()
        self.events_selected.emit()

    def current_metrics(self) -> dict[int, dict]:
        """Quality numbers of the units whose numbers are current (none pending), for saving."""
        return {u: row for u, row in self.metrics.items() if u not in self._stale}

    def current_detection(self) -> Detection:
        """Events at the workbench's threshold (:func:`rigside.core.units.event_rows.detection_at`), or
        :class:`RigsideError` saying what is missing."""
        b = self.bench
        if b.recording is None or b.events is None:
            raise RigsideError("clustering needs detected events, got none (open a recording and wait "
                               "for detection)")
        f = b.analysis.features
        if f is None or len(f.values) != len(b.events):
            raise RigsideError("clustering needs the events' features, got none yet (wait until they "
                               "are computed)")
        return detection_at(b.events, f, b.analysis.params, b.thresholds_sigma)

    def holds_detection(self, detection: Detection) -> bool:
        """True when the session's events are exactly these rows of the workbench's table."""
        return self.rows is not None and np.array_equal(self.rows, detection.rows)

    def cluster(self, k: int | None = None, groups: list[int] | None = None) -> bool:
        """Cluster the current detection: a new sorting, or one undoable step when the
        sorting already holds exactly these events."""
        try:
            detection = self.current_detection()
            params = detection.params
            params.cluster.k = k
            params.cluster.validate()
        except RigsideError as exc:
            self.window.show_error("Cannot cluster", str(exc))
            return False
        if self.holds_detection(detection):
            return self.run_step(ClusterGroups(params.cluster, groups))
        recording, events = self.bench.recording, detection.events
        self.runner.submit("sorting", "Clustering", first_pass_job, events, detection.features, params.cluster,
                           on_done=lambda s: self._new_sorting(recording, params, events, s))
        return True

    def _new_sorting(self, recording, params, events, sorting) -> None:
        if recording is not self.bench.recording:
            return
        self.attach(Session(RecordingRef.from_recording(recording), params, events, sorting))
        self.window.statusBar().showMessage(f"First pass: {len(sorting.units)} units from {len(events):,} "
                                            f"events.", 15000)

    # ---- curation steps -----------------------------------------------------------------------
    def busy(self) -> bool:
        return self.runner.busy(CURATION_SLOT) or self.runner.busy("sorting")

    def run_step(self, op) -> bool:
        """Prepare a step (off the GUI thread when slow) and push it on the undo stack."""
        if self.sorting is None:
            self.window.show_error("Nothing to curate", "curation needs units, got none (cluster first)")
            return False
        if self.busy():
            self.window.statusBar().showMessage("Wait for the running step to finish.", 5000)
            return False
        if isinstance(op, SLOW_STEPS):
            sorting = self.sorting
            self.runner.submit(CURATION_SLOT, op.text, prepare_step_job, op, sorting,
                               on_done=lambda done: self._push(done) if sorting is self.sorting else None)
            return True
        try:
            op.prepare(self.sorting)
        except RigsideError as exc:
            self.window.show_error(f"Cannot do: {op.text}", str(exc))
            return False
        self._push(op)
        return True

    def _push(self, op) -> None:
        self.undo_stack.push(StepCommand(op, self._core_stack))
        keep = [u for u in self._units_of(op) if u in self.sorting.units]
        if keep:
            self.set_selection(keep)

    def _units_of(self, op) -> list[int]:
        own = getattr(op, "units", None) or ([op.unit] if hasattr(op, "unit") else [])
        if isinstance(op, MoveEvents) and op.target not in (None, NO_UNIT):
            own = [op.target]
        return list(own) + list(op.created)

    def undo(self) -> None:
        if not self.busy() and self.undo_stack.canUndo():
            self.undo_stack.undo()

    def redo(self) -> None:
        if not self.busy() and self.undo_stack.canRedo():
            self.undo_stack.redo()

    def split(self, unit: int, x_axis: str, y_axis: str, vertices) -> bool:
        try:
            op = SplitByPolygon(unit, x_axis, y_axis, np.asarray(vertices).tolist())
        except RigsideError as exc:
            self.window.show_error("Cannot split", str(exc))
            return False
        return self.run_step(op)

    def merge(self, units: list[int]) -> bool:
        try:
            return self.run_step(MergeUnits(list(units)))
        except RigsideError as exc:
            self.window.show_error("Cannot merge", str(exc))
            return False

    def move_events(self, target: int | None) -> bool:
        """Move the events chosen by an outline to ``target`` (None: a new unit; -1: no unit)."""
        if not len(self.selected_events):
            self.window.show_error("Cannot move events", "moving needs chosen events, got none (outline "
                                   "them in the cluster plane first)")
            return False
        ok = self.run_step(MoveEvents(self.selected_events, target))
        if ok:
            self.select_events(np.zeros(0, dtype=np.int64))
        return ok

    def recluster(self, unit: int, k: int | None = None) -> bool:
        try:
            return self.run_step(ReclusterUnit(unit, k, self.session.params.cluster if self.session else None))
        except RigsideError as exc:
            self.window.show_error("Cannot recluster", str(exc))
            return False

    def relabel(self, units: list[int], label: str) -> bool:
        try:
            return self.run_step(Relabel(list(units), label))
        except RigsideError as exc:
            self.window.show_error("Cannot label", str(exc))
            return False

    def set_note(self, unit: int, note: str) -> bool:
        try:
            return self.run_step(SetNote(unit, note))
        except RigsideError as exc:
            self.window.show_error("Cannot write the note", str(exc))
            return False

    # ---- selection --------------------------------------------------------------------------
    def selectable(self) -> set[int]:
        """Ids that can be selected: the units and the :func:`pool_id` of every non-empty unassigned pool."""
        s = self.sorting
        return set() if s is None else set(s.units) | {pool_id(g) for g in s.pool_counts()}

    def set_selection(self, units) -> None:
        """Select units or unassigned pools (order kept: the first two form the pair of the
        cross-correlogram)."""
        known = self.selectable()
        new = list(dict.fromkeys(int(u) for u in units if int(u) in known))
        if new != self.selection:
            self.selection = new
            self.selection_changed.emit()

    def select_events(self, index: np.ndarray) -> None:
        self.selected_events = np.unique(np.asarray(index, dtype=np.int64))
        self.events_selected.emit()

    # ---- after every change -----------------------------------------------------------------
    def _on_sorting_changed(self, change) -> None:
        units = self.sorting.units
        for u in change.removed:
            self.metrics.pop(u, None)
        for u in change.members | change.added:     # labels and notes leave the numbers as they are
            if u != NO_UNIT and u in units:
                self._stale[u] = self.sorting.revision
        if len(self.selected_events):
            self.select_events(np.zeros(0, dtype=np.int64))
        known = self.selectable()
        if any(u not in known for u in self.selection):
            self.selection = [u for u in self.selection if u in known]
            self.selection_changed.emit()
        self._refresh_metrics()
        self.units_changed.emit(change)

    def _refresh_metrics(self) -> None:
        sorting = self.sorting
        if sorting is None or not self._stale:
            return
        counts = sorting.counts()
        for u in [u for u in self._stale if counts.get(u, 0) == 0]:
            del self._stale[u]
            self.metrics.pop(u, None)
        if not self._stale:
            self.metrics_changed.emit()
            return
        units = sorted(self._stale)
        revision = sorting.revision
        features = Features(sorting.data.features, list(sorting.data.feature_names))
        self.runner.submit(METRICS_SLOT, "Quality numbers", unit_metrics_job, self.events,
                           sorting.assignments.copy(), features, self.thresholds(), self.metric_settings(),
                           units, on_done=lambda t: self._on_metrics(t, sorting, revision))

    def _on_metrics(self, table: dict, sorting, revision: int) -> None:
        if sorting is not self.sorting:
            return
        units = sorting.units
        for i, u in enumerate(table["unit"].tolist()):
            if u in units:
                self.metrics[u] = {c: v[i] for c, v in table.items()}
        for u in table["unit"].tolist():
            if self._stale.get(u, revision + 1) <= revision:
                del self._stale[u]
        self.metrics_changed.emit()
