"""The window's audit of an earlier sorting: importing spike times, running the audit off the
GUI thread, the chosen imported unit beside its closest fresh unit, and the exports.

The fresh units are the session's curated units when the window holds a session of the open
recording (a frozen copy, so curation can go on meanwhile), otherwise a first-pass
clustering of events re-detected at the workbench's threshold.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from PySide6.QtCore import QObject, Signal

from rigside.core.audit.html_report import write_audit_report
from rigside.core.audit.run import CAUTION, AuditResult, AuditSettings, FreshUnits, first_pass_units, run_audit
from rigside.core.audit.table import write_audit_csv
from rigside.core.audit.views import PairView, pair_view
from rigside.core.errors import RigsideError
from rigside.core.io.atomic import check_output
from rigside.core.io.spike_import_files import load_spikes
from rigside.core.params import Params
from rigside.core.progress import report
from rigside.core.signal.pipeline import params_at_thresholds
from rigside.core.units.session import snapshot

AUDIT_SLOT, PAIR_SLOT, EXPORT_SLOT = "audit", "audit_pair", "audit_export"
AUDIT_LABEL = "Auditing an earlier sorting"
PAIR_LABEL = "Cutting the audit waveforms"
READ_SHARE = 0.02          # progress share of reading the spike file
FIRST_PASS_SHARE = 0.6     # progress share of the fresh first pass (when there is no session)
SPIKE_FILES = "Spike times (*.csv *.txt *.npy *.npz *.h5 *.hdf5 *.nwb);;All files (*)"


@dataclass
class ImportChoices:
    """How to read the spike file and what to compare with.

    ``rate_hz``: rate of a ``sample`` column (None: the recording's; a rate stored in the file
    wins); ``group``: HDF5 group (None: the root); ``offset_s``: subtracted from every time;
    ``use_session``: compare with the session's units when there is one (else a first pass).
    """

    rate_hz: float | None = None
    group: str | None = None
    offset_s: float = 0.0
    tolerance_ms: float = 0.5
    use_session: bool = True


def audit_job(recording, path: Path, choices: ImportChoices, fresh: FreshUnits | None, params: Params | None,
              settings: AuditSettings, progress=None, cancel=None) -> AuditResult:
    """Read the spikes, make fresh units if none are given, and audit (off the GUI thread)."""
    spikes = load_spikes(path, rate_hz=choices.rate_hz or recording.rate_hz, group=choices.group,
                         time_offset_s=choices.offset_s)
    spikes.check_within(recording.duration_s, recording.rate_hz)
    report(progress, READ_SHARE, f"{len(spikes):,} spikes of {len(spikes.unit_ids)} units read")
    base = READ_SHARE
    if fresh is None:
        share = FIRST_PASS_SHARE - READ_SHARE
        fresh = first_pass_units(recording, params, cancel=cancel,
                                 progress=lambda f, m: report(progress, READ_SHARE + share * f, f"fresh units: {m}"))
        base = FIRST_PASS_SHARE
    return run_audit(recording, spikes, fresh, settings, cancel=cancel,
                     progress=lambda f, m: report(progress, base + (1 - base) * f, m))


def pair_job(result: AuditResult, unit: int, recording, progress=None, cancel=None) -> PairView:
    return pair_view(result, unit, recording)


def write_job(kind: str, result: AuditResult, path: Path, progress=None, cancel=None) -> Path:
    if kind == "report":
        return write_audit_report(result, path)
    return write_audit_csv(result, path, CAUTION)


def first_pass_params(bench) -> Params:
    """The workbench's parameters at its threshold (one value for every channel, in σ or µV, or one
    per channel; the parameter default when a live channel has none), without the look-up floor."""
    ev = bench.events
    try:
        params = params_at_thresholds(bench.analysis.params, bench.thresholds_sigma,
                                      None if ev is None else ev.sigma_uv)
    except RigsideError:
        params = Params.from_dict(bench.analysis.params.to_dict())
    params.detect.floor_sigma = None
    return params


class AuditController(QObject):
    """Holds the latest audit of the window and the pair being looked at.

    Signals: ``result_changed()`` (a new result, or none), ``pair_changed()`` (the chosen
    unit's :class:`~rigside.core.audit.views.PairView` is ready, or gone), ``state_changed(str)``
    (a one-line description of what the audit is doing).
    """

    result_changed = Signal()
    pair_changed = Signal()
    state_changed = Signal(str)

    def __init__(self, window):
        super().__init__(window)
        self.window = window
        self.bench = window.bench
        self.runner = window.runner
        self.result: AuditResult | None = None
        self.spike_path: Path | None = None
        self.unit: int | None = None
        self.pair: PairView | None = None
        self.bench.recording_changed.connect(self.clear)
        self.runner.finished.connect(self._on_finished)

    # ---- what to compare with -------------------------------------------------------------
    def session(self):
        """The window's session if it belongs to the open recording and holds units, else None."""
        ctl = getattr(self.window, "units", None)
        s = getattr(ctl, "session", None)
        rec = self.bench.recording
        if s is None or rec is None or not s.sorting.unit_ids():
            return None
        try:
            same = Path(s.recording.path).resolve() == Path(rec.path).resolve()
        except OSError:
            return None
        return s if same else None

    def fresh_description(self, choices: ImportChoices) -> str:
        s = self.session() if choices.use_session else None
        if s is not None:
            return f"the session's {len(s.sorting.unit_ids())} units as curated now"
        p = first_pass_params(self.bench)
        thr = (f"{p.detect.threshold_uv:g} µV" if p.detect.threshold_uv is not None
               else f"{p.detect.threshold_sigma:g} σ")
        return f"a fresh first-pass clustering of events re-detected at {thr}"

    # ---- running ----------------------------------------------------------------------------
    def recording(self):
        """The open recording, or :class:`RigsideError` saying one is needed."""
        rec = self.bench.recording
        if rec is None:
            raise RigsideError("auditing needs the recording the spikes were sorted from open in the "
                               "window, got none (File > Open a recording)")
        return rec

    def start(self, path: str | Path, choices: ImportChoices | None = None) -> bool:
        """Audit the spikes in ``path`` against fresh units of the open recording, in the
        background; False (with a message) if it cannot start."""
        choices = choices or ImportChoices()
        try:
            rec = self.recording()
            settings = AuditSettings(tolerance_ms=float(choices.tolerance_ms))
            settings.validate()
            session = self.session() if choices.use_session else None
            fresh = FreshUnits.from_session(snapshot(session)) if session is not None else None
            params = None if fresh is not None else first_pass_params(self.bench)
            if params is not None:
                params.validate(rec.rate_hz)
        except RigsideError as exc:
            self.window.show_error("Cannot start the audit", str(exc))
            return False
        self.runner.cancel(PAIR_SLOT)
        self.spike_path = Path(path)
        self.state_changed.emit(f"Auditing {self.spike_path.name} against {self.fresh_description(choices)}…")
        self.runner.submit(AUDIT_SLOT, AUDIT_LABEL, audit_job, rec, self.spike_path, choices, fresh, params,
                           settings, on_done=self._on_result)
        return True

    def busy(self) -> bool:
        return self.runner.busy(AUDIT_SLOT)

    def cancel(self) -> None:
        self.runner.cancel(AUDIT_SLOT)

    def _on_result(self, result: AuditResult) -> None:
        self.result = result
        self.unit, self.pair = None, None
        n = len(result.imported_ids)
        self.state_changed.emit(f"{n} imported unit{'s' if n != 1 else ''} ({len(result.spikes):,} spikes) "
                                f"audited against {len(result.fresh_ids)} units of the {result.fresh.source}."
                                + (f" {result.spikes.empty_note()}." if result.spikes.empty_units else ""))
        self.result_changed.emit()
        self.pair_changed.emit()

    def _on_finished(self, label: str, outcome: str) -> None:
        if label == AUDIT_LABEL and outcome != "done" and not self.busy():
            what = "cancelled" if outcome == "cancelled" else "failed (see the message)"
            self.state_changed.emit(f"The audit {what}; the earlier result, if any, is still shown."
                                    if self.result is not None else f"The audit {what}.")

    def clear(self) -> None:
        """Forget the audit (the recording it belongs to was replaced)."""
        self.runner.cancel(AUDIT_SLOT)
        self.runner.cancel(PAIR_SLOT)
        self.result, self.spike_path, self.unit, self.pair = None, None, None, None
        self.state_changed.emit("")
        self.result_changed.emit()
        self.pair_changed.emit()

    # ---- one unit ---------------------------------------------------------------------------
    def select(self, unit: int | None) -> None:
        """Show imported ``unit`` beside its closest fresh unit (waveforms are cut in the background)."""
        if self.result is None or unit is None:
            self.unit, self.pair = None, None
            self.pair_changed.emit()
            return
        unit = int(unit)
        if unit == self.unit and self.pair is not None:
            return
        self.unit = unit
        self.runner.submit(PAIR_SLOT, PAIR_LABEL, pair_job, self.result, unit, self.bench.recording,
                           on_done=lambda pv, r=self.result: self._on_pair(pv, r))

    def _on_pair(self, pv: PairView, result: AuditResult) -> None:
        if result is self.result and pv.imported.unit == self.unit:
            self.pair = pv
            self.pair_changed.emit()

    # ---- exports ----------------------------------------------------------------------------
    def export(self, kind: str, path: str | Path) -> bool:
        """Write the HTML report (``kind="report"``) or the CSV table (``"table"``) in the
        background; False (with a message) if it cannot start."""
        suffixes = (".html", ".htm") if kind == "report" else (".csv",)
        what = "audit report" if kind == "report" else "audit table"
        try:
            if self.result is None:
                raise RigsideError(f"the {what} needs an audit, got none yet (Audit > Import earlier spike times)")
            rec = self.bench.recording
            out = check_output(path, rec.path if rec is not None else None, self.spike_path, suffixes=suffixes)
        except (RigsideError, OSError) as exc:
            self.window.show_error(f"Cannot write the {what}", str(exc))
            return False
        self.runner.submit(f"{EXPORT_SLOT}_{kind}", f"Writing the {what}", write_job, kind, self.result, out,
                           on_done=lambda p: self.window.statusBar().showMessage(f"Wrote {p}", 15000))
        return True
