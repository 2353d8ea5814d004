"""One batch task: detection on one recording with its outputs, any error turned into an outcome.

This is what every engine runs per recording (in this process, in a local process pool or on a
Dask worker), so it takes only plain, picklable arguments.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path

from rigside.core.errors import RigsideError
from rigside.core.io.atomic import protect_inputs
from rigside.core.params import Params


@dataclass
class BatchOutcome:
    """What happened to one recording."""

    recording: str
    status: str          # "done" or "failed"
    events: int
    duration_s: float
    seconds: float
    message: str = ""


def outputs_of(stem: str, out_dir: str | Path, fmt: str) -> tuple[Path, Path]:
    """The event file and summary written for one recording of output name ``stem``."""
    return Path(out_dir) / f"{stem}.events.{fmt}", Path(out_dir) / f"{stem}.summary.json"


def run_one(path: str, out_dir: str, params: Params, layout: dict, fmt: str = "csv",
            stem: str | None = None, inputs: tuple[str, ...] = ()) -> BatchOutcome:
    """Detect on one recording and write its outputs (named ``stem``, default the file's stem);
    errors become a "failed" outcome. ``inputs`` are protected from every write
    (see :func:`rigside.core.io.atomic.protect_inputs`)."""
    start = time.perf_counter()
    stem = stem or Path(path).name.split(".")[0] or "recording"
    try:
        with protect_inputs(inputs):
            return _detect_one(path, stem, out_dir, params, layout, fmt, start)
    except (RigsideError, OSError) as exc:
        return BatchOutcome(str(path), "failed", 0, 0.0, time.perf_counter() - start, str(exc))


def _detect_one(path: str, stem: str, out_dir: str, params: Params, layout: dict, fmt: str,
                start: float) -> BatchOutcome:
    from rigside.core.io.recording import open_recording
    from rigside.core.runs.detect import detect_to_files

    rec = open_recording(path, **layout)
    try:
        done = detect_to_files(rec, params, *outputs_of(stem, out_dir, fmt))
        return BatchOutcome(str(path), "done", len(done.events), rec.duration_s, time.perf_counter() - start)
    finally:
        rec.close()
