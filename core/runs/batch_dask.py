"""Batch tasks on Dask: a pool of local processes, or a running ``dask.distributed`` scheduler.

On a scheduler every recording is one task; the workers read the recordings and write their
outputs themselves, so recordings and output folder must be at the same paths on every worker
machine (relative paths are made absolute on the submitting machine). A task that raises is
resubmitted up to ``TASK_RETRIES`` times; a task whose worker is lost is run again on another
worker by the scheduler (up to its ``distributed.scheduler.allowed-failures`` setting); a task
that still fails becomes a "failed" outcome and the other tasks go on.
"""

from __future__ import annotations

import asyncio
import os
import queue
import time
from pathlib import Path

from rigside.core.errors import ParamError
from rigside.core.params import Params
from rigside.core.progress import CancelFn, Cancelled, ProgressFn, check, report
from rigside.core.runs.batch_task import BatchOutcome, run_one

TASK_RETRIES = 2
"""Resubmissions of a task that raised (worker losses are counted by the scheduler)."""

CANCEL_POLL_S = 0.5
"""How often the cancel check runs while waiting for tasks."""

Jobs = list[tuple[str, str]]
"""(recording path, output name) per task."""


def _need(module: str):
    import importlib
    try:
        return importlib.import_module(module)
    except ImportError:
        raise ParamError(f"the dask engine needs the {module} package, got none installed "
                         "(pip install 'rigside[dask]')") from None


def on_local_processes(jobs: Jobs, out_dir: Path, params: Params, layout: dict, fmt: str, workers: int,
                       inputs: tuple[str, ...], cancel: CancelFn = None) -> list[BatchOutcome]:
    """One Dask task per recording on ``workers`` local processes; outcomes in job order."""
    dask = _need("dask")
    check(cancel)
    tasks = [dask.delayed(run_one)(str(p), str(out_dir), params, layout, fmt, s, inputs) for p, s in jobs]
    return list(dask.compute(*tasks, scheduler="processes", num_workers=max(1, workers)))


def check_scheduler(address: str, timeout_s: float) -> None:
    """Raise :class:`ParamError` unless a Dask scheduler answers at ``address`` within ``timeout_s``."""
    comm_mod = _need("distributed.comm")

    async def ask() -> object:
        comm = await comm_mod.connect(address, timeout=timeout_s)
        try:
            await comm.write({"op": "identity", "reply": True})
            return await comm.read()
        finally:
            comm.abort()

    async def bounded() -> object:
        return await asyncio.wait_for(ask(), timeout_s)

    try:
        reply = asyncio.run(bounded())
    except (TimeoutError, asyncio.TimeoutError):
        raise ParamError(f"dask scheduler must answer at {address!r} within {timeout_s:g} s, got no answer") from None
    except Exception as exc:  # a wrong address or a server that is not a scheduler: any error from the probe
        raise ParamError(f"dask scheduler must answer at {address!r} within {timeout_s:g} s, "
                         f"got {type(exc).__name__}: {str(exc)[:200]}") from None
    if not (isinstance(reply, dict) and reply.get("type") == "Scheduler"):
        raise ParamError(f"dask scheduler must answer at {address!r}, got a reply that is not a scheduler's")


def _worker_version() -> str:
    from rigside.core import __version__
    return __version__


def _connect(address: str, timeout_s: float):
    """A client of the scheduler at ``address`` with at least one worker running this rigside."""
    check_scheduler(address, timeout_s)
    distributed = _need("distributed")
    try:
        client = distributed.Client(address, timeout=timeout_s, set_as_default=False)
    except Exception as exc:  # the scheduler went away between the probe and the client
        raise ParamError(f"dask scheduler must accept a client at {address!r} within {timeout_s:g} s, "
                         f"got {type(exc).__name__}: {str(exc)[:200]}") from None
    try:
        _check_workers(client, address, timeout_s)
    except BaseException:
        client.close()
        raise
    return client


def _check_workers(client, address: str, timeout_s: float) -> None:
    from rigside.core import __version__

    try:
        client.wait_for_workers(1, timeout=timeout_s)
    except TimeoutError:
        raise ParamError(f"dask scheduler at {address!r} must have a worker within {timeout_s:g} s, got none "
                         f"(start one with: dask worker {address})") from None
    except OSError as exc:
        raise ParamError(f"dask scheduler at {address!r} must stay reachable, got {type(exc).__name__}: "
                         f"{str(exc)[:200]}") from None
    try:
        versions = client.run(_worker_version)
    except Exception as exc:  # the workers could not even load rigside's function, or went away
        raise ParamError(f"every dask worker must have rigside installed and answer, got {type(exc).__name__}: "
                         f"{str(exc)[:200]}") from None
    other = {w: v for w, v in versions.items() if v != __version__}
    if other:
        raise ParamError(f"every dask worker must run rigside {__version__}, got "
                         + ", ".join(f"{v} on {w}" for w, v in sorted(other.items())))


def on_scheduler(jobs: Jobs, out_dir: Path, params: Params, layout: dict, fmt: str, inputs: tuple[str, ...],
                 address: str, timeout_s: float = 10.0, progress: ProgressFn = None,
                 cancel: CancelFn = None) -> list[BatchOutcome]:
    """One task per recording on the scheduler at ``address``; outcomes in job order.

    Parameters
    ----------
    jobs
        (recording path, output name) per recording.
    out_dir, params, layout, fmt, inputs
        As for :func:`rigside.core.runs.batch_task.run_one`.
    address
        Scheduler address (``tcp://host:8786``).
    timeout_s
        Limit for reaching the scheduler and for finding a worker there.
    progress, cancel
        Progress per finished task ("k of n tasks done"); cancel check every ``CANCEL_POLL_S``
        (the tasks not finished are cancelled on the cluster).

    Returns
    -------
    list of BatchOutcome
        With the recording paths as given.
    """
    absolute = tuple(os.path.abspath(p) for p in inputs)
    client = _connect(address, timeout_s)
    with client:
        done: queue.Queue = queue.Queue()
        futures = []
        for i, (path, stem) in enumerate(jobs):
            fut = client.submit(run_one, os.path.abspath(path), os.path.abspath(out_dir), params, layout, fmt,
                                stem, absolute, pure=False, retries=TASK_RETRIES)
            fut.add_done_callback(lambda _f, i=i: done.put(i))
            futures.append(fut)
        outcomes: list[BatchOutcome | None] = [None] * len(jobs)
        started, finished = time.perf_counter(), 0
        report(progress, 0.0, f"0 of {len(jobs)} tasks done")
        while finished < len(jobs):
            if cancel is not None and cancel():
                client.cancel(futures)
                raise Cancelled("operation cancelled")
            try:
                i = done.get(timeout=CANCEL_POLL_S)
            except queue.Empty:
                continue
            lost = client.status != "running"
            outcomes[i] = _outcome(futures[i], jobs[i][0], time.perf_counter() - started, lost)
            finished += 1
            report(progress, finished / len(jobs), f"{finished} of {len(jobs)} tasks done")
    return outcomes


def _outcome(fut, given: str, seconds: float, lost: bool = False) -> BatchOutcome:
    """The task's outcome under the path as given, or a "failed" one saying why the task failed
    (``lost``: the connection to the scheduler is gone)."""
    if fut.status == "finished":
        outcome = fut.result()
        outcome.recording = given
        return outcome
    if fut.status == "error":
        exc = fut.exception()
        reason = f"{type(exc).__name__}: {exc}"
    elif lost:
        reason = f"the connection to the scheduler was lost (the task was {fut.status})"
    else:
        reason = f"the task was {fut.status} on the cluster"
    return BatchOutcome(given, "failed", 0, 0.0, seconds, f"dask task failed: {reason}")
