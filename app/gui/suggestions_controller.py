"""The window's curation suggestions: computed off the GUI thread, accepted or rejected in one step.

:class:`SuggestionsController` recomputes the suggestions of the held sorting after every change
(a new sorting, a step, an undo or redo) in the ``suggestions`` job, on a copy of the sorting,
while its panel is in view (a change made while it is hidden is weighed when it is shown again),
with mean waveforms when the workbench holds the session's recording. Accepting a suggestion
runs its step (a merge, or the split into the two parts of its evidence) and rejecting it runs a
:class:`~rigside.core.units.dismissals.DismissSuggestion`, both through the sorting controller's
undo stack, so the journal records them and Edit > Undo takes them back.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QObject, QTimer, Signal

from rigside.core.quality.metric_settings import metric_settings
from rigside.core.quality.suggestions import Suggestion, SuggestParams, mean_waveforms, suggest
from rigside.core.units.dismissals import key_of

SLOT = "suggestions"


def _suggest_job(recording, session, sorting, params: SuggestParams, progress=None, cancel=None):
    """Mean waveforms (when a recording is given) and the suggestions of ``sorting`` (a copy)."""
    waveforms = None
    if recording is not None:
        big = [u for u, n in sorting.counts().items() if n >= params.min_events]
        waveforms = mean_waveforms(recording, session.events, session.params, sorting, big, params.waveform_events,
                                   lambda f, m: progress(0.5 * f, m) if progress else None, cancel)
    return suggest(session.events, sorting, metric_settings(session.params), waveforms, params,
                   lambda f, m: progress(0.5 + 0.5 * f, m) if progress else None, cancel, session.params.cluster)


class SuggestionsController(QObject):
    """Suggestions of the window's sorting. Qt signal ``changed()``: the list or its status changed."""

    changed = Signal()

    def __init__(self, window, units):
        super().__init__(window)
        self.window, self.units, self.runner = window, units, window.runner
        self.params = SuggestParams(top=50)
        self.suggestions: list[Suggestion] = []
        self.status = "No sorting yet: cluster or open a session."
        self.with_waveforms = False
        self.revision = -1
        """Revision of the sorting the list was computed for (-1: none)."""
        self.active = False
        """True while the panel is in view: only then are changes weighed at once."""
        self._stale = True
        self._soon = QTimer(self, singleShot=True, interval=0)
        self._soon.timeout.connect(self.refresh)   # after the step is journaled (the change is announced first)
        units.sorting_replaced.connect(self._changed)
        units.units_changed.connect(lambda _change: self._changed())

    def _changed(self) -> None:
        self._stale = True
        if self.active:
            self._soon.start()

    def set_active(self, shown: bool) -> None:
        """The panel came into view (weigh what changed meanwhile) or left it."""
        self.active = bool(shown)
        if self.active and self._stale:
            self.refresh()

    def _recording(self):
        """The workbench's recording when it is the session's (mean waveforms are cut from it), else None."""
        rec, session = self.window.bench.recording, self.units.session
        if rec is None or session is None:
            return None
        try:
            return rec if Path(rec.path).resolve() == Path(session.recording.path).resolve() else None
        except OSError:
            return None

    def refresh(self) -> None:
        """Recompute the suggestions of the current sorting in the background."""
        self._stale = False
        self._soon.stop()
        session = self.units.session
        if session is None:
            self.runner.cancel(SLOT)
            self.suggestions, self.status = [], "No sorting yet: cluster or open a session."
            self.changed.emit()
            return
        sorting, recording = session.sorting, self._recording()
        self.status = "Weighing the units…"
        self.changed.emit()
        self.runner.submit(SLOT, "Suggestions", _suggest_job, recording, session, sorting.copy(), self.params,
                           on_done=lambda found: self._done(found, sorting, sorting.revision, recording is not None))

    def _done(self, found: list[Suggestion], sorting, revision: int, with_waveforms: bool) -> None:
        if sorting is not self.units.sorting or sorting.revision != revision:
            return          # a later change has its own computation coming
        self.suggestions, self.with_waveforms, self.revision = found, with_waveforms, revision
        merges = sum(s.kind == "merge" for s in found)
        self.status = (f"{merges} merge and {len(found) - merges} split suggestions, best first"
                       + ("" if with_waveforms else " (waveforms not compared: the session's recording is not open)")
                       + ". Hover a row for all its numbers.")
        self.changed.emit()

    def _current(self, s: Suggestion) -> bool:
        """True when the suggestion's units still hold the events it was computed for (else say so)."""
        sorting = self.units.sorting
        if sorting is not None and all(u in sorting.units for u in s.units) and key_of(sorting, s.kind,
                                                                                       s.units) == s.key:
            return True
        self.window.statusBar().showMessage("That suggestion is out of date; the list is being refreshed.", 5000)
        self.refresh()
        return False

    def accept(self, s: Suggestion) -> bool:
        """Do the suggested step (merge, or split in two) through the undo stack."""
        return self._current(s) and self.units.run_step(s.operation())

    def reject(self, s: Suggestion) -> bool:
        """Remember in the session that this suggestion was rejected (an undoable step)."""
        if not (self._current(s) and self.units.run_step(s.dismissal())):
            return False
        self.suggestions = [x for x in self.suggestions if x.key != s.key]
        self.changed.emit()
        return True
