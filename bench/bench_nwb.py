"""Benchmark of detection from an NWB ElectricalSeries against the same samples as raw binary.

A generated 64-channel, 30 kHz int16 recording is written as raw binary and, sample for sample,
as an NWB file (pynwb) twice: data stored contiguously and data stored in chunks of one second x
64 channels. Prints, from one run, the in-process detection time (best of --repeats, the formats
interleaved) of each NWB layout as a ratio of the raw file's (target: within 1.5x), the same for
the whole `rigside detect` command in a fresh process with its peak memory (max RSS), and checks
that the events are identical.

    python bench/bench_nwb.py [--seconds 60] [--repeats 3] [--workdir DIR]
"""

from __future__ import annotations

import argparse
import datetime
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rigside.core.io.recording import open_recording  # noqa: E402
from rigside.core.params import Params  # noqa: E402
from rigside.core.signal.pipeline import detect  # noqa: E402
from rigside.core.synthetic.synth import GAIN_UV, write_synth  # noqa: E402


def write_nwb_copy(raw: Path, out: Path, chunks: tuple[int, int] | None) -> None:
    """The raw file's samples as one ElectricalSeries (electrode groups = the raw file's groups)."""
    import pynwb
    from hdmf.backends.hdf5.h5_utils import H5DataIO
    from pynwb.ecephys import ElectricalSeries

    rec = open_recording(raw)
    data = np.memmap(raw, dtype="<i2", mode="r").reshape(-1, rec.n_channels)
    nwb = pynwb.NWBFile(session_description="benchmark copy", identifier=out.stem,
                        session_start_time=datetime.datetime(2026, 1, 1, tzinfo=datetime.timezone.utc))
    dev = nwb.create_device("bench probe")
    for gi, g in enumerate(rec.groups):
        eg = nwb.create_electrode_group(f"bundle{gi}", description="wire bundle", location="cortex", device=dev)
        for _ in g:
            nwb.add_electrode(group=eg, location="cortex")
    region = nwb.create_electrode_table_region(list(range(rec.n_channels)), "all channels")
    nwb.add_acquisition(ElectricalSeries(name="raw", data=H5DataIO(data, chunks=chunks) if chunks else data,
                                         electrodes=region, rate=rec.rate_hz, conversion=GAIN_UV * 1e-6))
    with pynwb.NWBHDF5IO(str(out), "w") as io:
        io.write(nwb)
    rec.close()


def timed_detect(path: Path):
    rec = open_recording(path)
    t = time.perf_counter()
    events = detect(rec, Params())
    wall = time.perf_counter() - t
    rec.close()
    return wall, events


def run_command(path: Path) -> tuple[float, float]:
    """Wall time and peak RSS (MB) of `rigside detect` in a fresh process."""
    code = ("import sys, resource; from rigside.cli.main import main; rc = main(sys.argv[1:]); "
            "print('MAXRSS', resource.getrusage(resource.RUSAGE_SELF).ru_maxrss); sys.exit(rc)")
    t = time.perf_counter()
    r = subprocess.run([sys.executable, "-c", code, "detect", str(path), "--out",
                        str(path.with_name(path.stem + ".events.h5")), "--quiet"],
                       cwd=ROOT, capture_output=True, text=True, check=True)
    return time.perf_counter() - t, int(r.stdout.split("MAXRSS")[1].split()[0]) / 1024


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--seconds", type=float, default=60.0, help="recording length (default 60 s)")
    ap.add_argument("--repeats", type=int, default=3, help="timed runs per format (default 3)")
    ap.add_argument("--workdir", help="where to write the recordings (default: a temporary folder)")
    a = ap.parse_args()
    work = Path(a.workdir or tempfile.mkdtemp(prefix="rigside-bench-nwb-"))
    raw = work / "rig.bin"
    files = {"raw": raw, "nwb contiguous": work / "rig_contiguous.nwb", "nwb chunked": work / "rig_chunked.nwb"}
    if not raw.exists():
        write_synth(raw, seconds=a.seconds, channels=64, seed=1)
    for name, chunks in (("nwb contiguous", None), ("nwb chunked", (30000, 64))):
        if not files[name].exists():
            write_nwb_copy(raw, files[name], chunks)
    timed_detect(raw)                                   # warm the kernels and the page cache
    best: dict[str, float] = {}
    events: dict[str, object] = {}
    for _ in range(a.repeats):
        for name, path in files.items():
            wall, ev = timed_detect(path)
            best[name] = min(best.get(name, wall), wall)
            events[name] = ev
    same = all(np.array_equal(events[n].sample, events["raw"].sample)
               and np.array_equal(events[n].channel, events["raw"].channel)
               and np.array_equal(events[n].amplitude_uv, events["raw"].amplitude_uv) for n in files)
    print(f"64 channels, {a.seconds:g} s at 30 kHz ({raw.stat().st_size / 1e6:.0f} MB raw); "
          f"{len(events['raw']):,} events, identical in every format: {same}")
    print(f"{'format':<16} {'detect (s)':>10} {'x raw':>6} {'command (s)':>11} {'x raw':>6} {'max RSS (MB)':>12}")
    command = {name: run_command(path) for name, path in files.items()}
    for name in files:
        print(f"{name:<16} {best[name]:10.2f} {best[name] / best['raw']:6.2f} {command[name][0]:11.2f} "
              f"{command[name][0] / command['raw'][0]:6.2f} {command[name][1]:12.0f}")
    worst = max(best[n] / best["raw"] for n in files if n != "raw")
    print(f"slowest NWB layout / raw (in-process detection): {worst:.2f}x (target <= 1.5x)")


if __name__ == "__main__":
    main()
