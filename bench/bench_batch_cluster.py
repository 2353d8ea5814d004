"""Benchmark of `batch` on a dask.distributed cluster against the sequential engine.

Generates N recordings in a temporary folder (`rigside synth`), then times in this process:
1. the baseline: the sequential engine (one recording after another, `--workers` threads each);
2. the same batch on a LocalCluster on the loopback interface (worker processes with one Dask
   thread each), after every worker has detected on one recording (imports and compiled kernels
   loaded), which is printed on its own with the cluster's start-up.
Prints the cluster / sequential ratio and checks that both wrote the same event files.

    python bench/bench_batch_cluster.py [--recordings 4] [--seconds 20] [--channels 16] [--workers 2]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rigside.core.params import Params  # noqa: E402
from rigside.core.runs.batch import run_batch  # noqa: E402
from rigside.core.runs.batch_task import run_one  # noqa: E402
from rigside.core.synthetic.synth import write_synth  # noqa: E402


def timed(fn) -> float:
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--recordings", type=int, default=4)
    ap.add_argument("--seconds", type=float, default=20.0)
    ap.add_argument("--channels", type=int, default=16)
    ap.add_argument("--workers", type=int, default=2, help="cluster worker processes")
    args = ap.parse_args()
    import distributed

    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        files = []
        for i in range(args.recordings):
            write_synth(d / f"rec{i}.bin", seconds=args.seconds, channels=args.channels, seed=i)
            files.append(str(d / f"rec{i}.bin"))
        params = Params()
        for name in ("seq", "warm", "cluster"):
            (d / name).mkdir()
        seq = timed(lambda: run_batch(files, d / "seq", params))
        t = time.perf_counter()
        with distributed.LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True,
                                      host="127.0.0.1", dashboard_address=":0") as c:
            start = time.perf_counter() - t
            with distributed.Client(c, set_as_default=False) as client:   # every worker detects once
                warm = timed(lambda: client.run(run_one, files[0], str(d / "warm"), params, {}, "csv"))
            cl = timed(lambda: run_batch(files, d / "cluster", params, engine="dask",
                                         scheduler=c.scheduler_address))
        same = all((d / "seq" / f"rec{i}.events.csv").read_bytes() == (d / "cluster" / f"rec{i}.events.csv")
                   .read_bytes() for i in range(args.recordings))
    print(f"{args.recordings} recordings of {args.seconds:g} s x {args.channels} channels, "
          f"{params.run.workers} detection threads per recording")
    print(f"baseline, sequential engine:          {seq:7.2f} s")
    print(f"cluster of {args.workers} worker processes:        {cl:7.2f} s  "
          f"(ratio {cl / seq:.2f} of the baseline)")
    print(f"cluster start {start:.2f} s, warm-up (one detection on every worker) {warm:.2f} s (not in the ratio)")
    print(f"event files identical: {same}")


if __name__ == "__main__":
    main()
