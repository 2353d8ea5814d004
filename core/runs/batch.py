"""Detection over many recordings: one after another here, or as tasks on Dask (local processes
or a running ``dask.distributed`` scheduler, see :mod:`rigside.core.runs.batch_dask`).

Each recording gets ``<stem>.events.csv`` (or ``.h5``) and ``<stem>.summary.json`` in the
output folder (recordings sharing a stem, such as ``day1/rec.bin`` and ``day2/rec.bin``, are named
after their differing parent folders: ``day1_rec``, ``day2_rec``); a recording that cannot be
processed is reported with its error and does not stop the others. ``batch.csv`` lists every recording with its outcome.
"""

from __future__ import annotations

import csv
from pathlib import Path

from rigside.core.errors import ParamError
from rigside.core.io.atomic import (
    atomic_write,
    check_not_input,
    protect_inputs,
    protected_inputs,
    safe_unlink,
    stale_temporaries,
)
from rigside.core.params import Params
from rigside.core.progress import CancelFn, ProgressFn, check, report
from rigside.core.runs.batch_task import BatchOutcome, outputs_of, run_one

ENGINES = ("local", "dask")
"""The engines (the heavy stages are imported inside the functions: naming the engines in a
command's help loads no numerics)."""


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


def check_engine(engine: str, scheduler: str | None = None, connect_timeout_s: float = 10.0) -> None:
    """Raise :class:`ParamError` for an unknown engine, a scheduler without the dask engine or a
    timeout outside (0, 600] s."""
    if engine not in ENGINES:
        raise ParamError(f"batch engine must be one of {', '.join(ENGINES)}, got {engine!r}")
    if scheduler is not None and engine != "dask":
        raise ParamError(f"a scheduler address must come with the dask engine, got the {engine} engine")
    if not 0 < connect_timeout_s <= 600:
        raise ParamError(f"scheduler timeout must be above 0 and at most 600 s, got {connect_timeout_s:g}")


def run_batch(paths: list[str], out_dir: str | Path, params: Params, layout: dict | None = None,
              fmt: str = "csv", engine: str = "local", workers: int = 2, progress: ProgressFn = None,
              cancel: CancelFn = None, scheduler: str | None = None,
              connect_timeout_s: float = 10.0) -> list[BatchOutcome]:
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
        "dask": one Dask task per recording, on ``workers`` local processes or, with
        ``scheduler``, on that running ``dask.distributed`` scheduler's workers.
    workers
        Processes for the Dask engine without a scheduler.
    progress, cancel
        Progress callback (per finished recording) and cancel check (between recordings; with
        local Dask processes before the tasks start; on a scheduler while waiting for tasks).
    scheduler
        Address of a running Dask scheduler (``tcp://host:8786``), for the "dask" engine only.
    connect_timeout_s
        Limit for reaching the scheduler and finding a worker there.

    Returns
    -------
    list of BatchOutcome
        In the order of ``paths``; outputs are the same whichever engine wrote them.
    """
    check_engine(engine, scheduler, connect_timeout_s)
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
    jobs = [(str(p), s) for p, s in zip(paths, stems)]
    if engine == "dask":
        from rigside.core.runs import batch_dask
        if scheduler is None:
            outcomes = batch_dask.on_local_processes(jobs, out_dir, params, layout, fmt, workers, inputs, cancel)
        else:
            outcomes = batch_dask.on_scheduler(jobs, out_dir, params, layout, fmt, inputs, scheduler,
                                               connect_timeout_s, progress, cancel)
    else:
        outcomes = []
        for i, (p, s) in enumerate(jobs):
            check(cancel)
            outcomes.append(run_one(p, str(out_dir), params, layout, fmt, s, inputs))
            report(progress, (i + 1) / len(paths), f"{i + 1} of {len(paths)} recordings")
    with protect_inputs(inputs):
        _remove_leftovers(stems, out_dir, fmt)
        write_outcomes(out_dir / "batch.csv", outcomes)
    report(progress, 1.0, "batch done")
    return outcomes


def _remove_leftovers(stems: list[str], out_dir: Path, fmt: str) -> None:
    """Delete the temporary files of this batch's outputs that a stopped process left behind
    (a worker killed while writing); every task has ended, so none is still being written."""
    for stem in stems:
        for out in outputs_of(stem, out_dir, fmt):
            for tmp in stale_temporaries(out):
                safe_unlink(tmp)


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
