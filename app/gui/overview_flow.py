"""The window's use of the trace overview: reuse the cached one, or build it during detection."""

from __future__ import annotations

from rigside.core.signal.overview import Overview, OverviewBuilder
from rigside.gui import jobs

OVERVIEW_LABEL = "Building the trace overview"


def builder_for(bench) -> OverviewBuilder | None:
    """A builder for the coming detection pass, or None when a cached overview is shown already."""
    if bench.recording is None or bench.overview is not None:
        return None
    return OverviewBuilder(bench.recording, bench.analysis.params.filter)


def after_detection(window, builder: OverviewBuilder | None) -> None:
    """Show the overview the pass built, or say why not; rebuild a cached one the content hash refutes."""
    b = window.bench
    if builder is not None:
        _use(window, builder, b.recording)
    elif b.overview is not None and not b.overview.matches_content(b.recording.content_hash):
        b.set_overview(None)      # the quick fingerprint matched but the content differs
        rec = b.recording
        window.runner.submit("overview", OVERVIEW_LABEL, jobs.overview, rec, b.analysis.params.filter,
                             on_done=lambda built: _use(window, built, rec))


def _use(window, builder: OverviewBuilder, recording) -> None:
    if window.bench.recording is not recording:
        return
    if builder.path is not None:
        window.bench.set_overview(Overview(builder.path))
    elif builder.error:
        window.statusBar().showMessage(f"Trace overview not cached: {builder.error}", 15000)
