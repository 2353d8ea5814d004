"""Detection over many recordings: one after another here, or as tasks on Dask.

Each recording gets ``<stem>.events.csv`` (or ``.h5``) and ``<stem>.summary.json`` in the
output folder (recordings sharing a stem, such as ``day1/rec.bin`` and ``day2/rec.bin``, are named
after their differing parent folders: ``day1_rec``, ``day2_rec``); a recording that cannot be
processed is reported with its error and does not stop the others. ``batch.csv`` lists every recording with its outcome.
"""

from __future__ import annotations

import csv
import time
from dataclasses import dataclass
from pathlib import Path

from rigside.core.errors import ParamError, RigsideError
from rigside.core.io.atomic import atomic_write, check_not_input, protect_inputs, protected_inputs
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn, check, report

ENGINES = ("local", "dask")
"""The engines (the heavy stages are imported inside the functions: naming the engines in a
command's help loads no numerics)."""


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


def output_names(paths: list[str | Path]) -> list[str]:
    """A distinct output name per recording: its stem, prefixed for recordings sharing a stem with
    as many of their parent folders as tell them apart (``day1/rec.bin`` -> ``day1_rec``)."""
    stems = [Path(p).name.split(".")[0] or "recording" for p in paths]
    parents = [Path(p).resolve().parent.parts for p in paths]
    names = list(stems)
    for stem in {s for s in stems if stems.count(s) > 1}:
        idx = [i for i, s in enumerate(stems) if s == stem]
        for k in range(1, max(len(parents[i]) for i in idx) + 1):
            cand = ["_".join([*parents[i][-k:], stem]).lstrip("/_") for i in idx]
            if len(set(cand)) == len(cand):
                break
        else:
            raise ParamError(f"recordings must be distinct files in one batch, got "
                             f"{', '.join(str(paths[i]) for i in idx)}")
        for i, c in zip(idx, cand):
            names[i] = c
    clash = sorted({n for n in names if names.count(n) > 1})
    if clash:
        raise ParamError(f"recordings must have distinct output names in one batch, got {', '.join(clash)} twice")
    return names



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


def _protected(paths: list[str], stems: list[str], out_dir: Path, fmt: str) -> tuple[str, ...]:
    """Every input of the batch (recordings, their side files, the command's own inputs),
    after checking that no planned output is one of them."""
    from rigside.core.io.recording import side_files

    inputs = (*protected_inputs(), *map(str, paths), *(str(f) for p in paths for f in side_files(p)))
    with protect_inputs(inputs):
        for stem in stems:
            for out in outputs_of(stem, out_dir, fmt):
                check_not_input(out, "batch output")
        check_not_input(out_dir / "batch.csv", "batch output")
    return inputs


def run_batch(paths: list[str], out_dir: str | Path, params: Params, layout: dict | None = None,
              fmt: str = "csv", engine: str = "local", workers: int = 2, progress: ProgressFn = None,
              cancel: CancelFn = None) -> list[BatchOutcome]:
    """Detect on every recording and write a ``batch.csv`` of outcomes.

    Parameters
    ----------
    paths
        Recordings (all read with the same layout options).
    out_dir
        Existing folder for the outputs.
    params
        Parameters for every recording.
    layout
        Keyword options of :func:`rigside.core.io.recording.open_recording` (channels, rate_hz, ...).
    fmt
        "csv" or "h5" for the event files.
    engine
        "local": one recording after another, each using ``params.run.workers`` threads;
        "dask": one Dask task per recording on ``workers`` local processes.
    workers
        Processes for the Dask engine.
    progress, cancel
        Progress callback (per finished recording) and cancel check (between recordings;
        with Dask, before the tasks start).

    Returns
    -------
    list of BatchOutcome
        In the order of ``paths``.
    """
    if engine not in ENGINES:
        raise ParamError(f"batch engine must be one of {', '.join(ENGINES)}, got {engine!r}")
    if fmt not in ("csv", "h5"):
        raise ParamError(f"event format must be csv or h5, got {fmt!r}")
    if not paths:
        raise ParamError("batch needs at least one recording, got none")
    stems = output_names(paths)
    out_dir = Path(out_dir)
    if not out_dir.is_dir():
        raise ParamError(f"batch output folder must exist, got {str(out_dir)!r}")
    layout = layout or {}
    params.validate()
    inputs = _protected(paths, stems, out_dir, fmt)
    if engine == "dask":
        outcomes = _on_dask(paths, stems, out_dir, params, layout, fmt, workers, cancel, inputs)
    else:
        outcomes = []
        for i, p in enumerate(paths):
            check(cancel)
            outcomes.append(run_one(str(p), str(out_dir), params, layout, fmt, stems[i], inputs))
            report(progress, (i + 1) / len(paths), f"{i + 1} of {len(paths)} recordings")
    with protect_inputs(inputs):
        write_outcomes(out_dir / "batch.csv", outcomes)
    report(progress, 1.0, "batch done")
    return outcomes


def _on_dask(paths, stems, out_dir, params, layout, fmt, workers, cancel, inputs) -> list[BatchOutcome]:
    try:
        import dask
    except ImportError:
        raise ParamError("the dask engine needs the dask package, got none installed "
                         "(pip install 'rigside[dask]')") from None
    check(cancel)
    tasks = [dask.delayed(run_one)(str(p), str(out_dir), params, layout, fmt, s, inputs)
             for p, s in zip(paths, stems)]
    return list(dask.compute(*tasks, scheduler="processes", num_workers=max(1, workers)))


def write_outcomes(path: Path, outcomes: list[BatchOutcome]) -> Path:
    """``recording,status,events,duration_s,seconds,message`` per recording, atomically."""
    from rigside.core.quality.unit_table_io import safe_text

    def write(tmp: Path) -> None:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["recording", "status", "events", "duration_s", "seconds", "message"])
            for o in outcomes:
                w.writerow([safe_text(o.recording), safe_text(o.status), o.events, f"{o.duration_s:.3f}",
                            f"{o.seconds:.2f}", safe_text(o.message)])
    return atomic_write(path, write)
