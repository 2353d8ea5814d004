import csv
import json

import pytest

from app.cli import main
from core.synth import write_synth


@pytest.fixture(scope="module")
def recordings(tmp_path_factory):
    d = tmp_path_factory.mktemp("batch")
    for i in range(2):
        write_synth(d / f"r{i}.bin", seconds=2, channels=4, seed=i)
    (d / "broken.bin").write_bytes(b"\x00" * 7)
    (d / "broken.rigside.toml").write_text("[recording]\nchannels = 4\nrate_hz = 30000\n")
    return d


def outcomes(folder):
    return {row["recording"].split("/")[-1]: row for row in csv.DictReader(open(folder / "batch.csv"))}


def test_local_batch_writes_every_output_and_reports_failures(recordings, capsys):
    out = recordings / "out"
    code = main(["batch", str(recordings / "r0.bin"), str(recordings / "broken.bin"), str(recordings / "r1.bin"),
                 "--out-dir", str(out), "--quiet"])
    assert code == 2  # one recording failed: an input error, the others still done
    rows = outcomes(out)
    assert rows["r0.bin"]["status"] == "done" and rows["r1.bin"]["status"] == "done"
    assert rows["broken.bin"]["status"] == "failed" and "multiple of channels" in rows["broken.bin"]["message"]
    for stem in ("r0", "r1"):
        events = list(csv.DictReader(open(out / f"{stem}.events.csv")))
        summary = json.load(open(out / f"{stem}.summary.json"))
        assert len(events) == int(rows[f"{stem}.bin"]["events"]) == sum(c["events"] for c in summary["channels"])
    assert "failed: " in capsys.readouterr().out


def test_dask_engine_gives_the_same_events_as_local(recordings):
    local, dask_out = recordings / "local", recordings / "dask"
    files = [str(recordings / "r0.bin"), str(recordings / "r1.bin")]
    assert main(["batch", *files, "--out-dir", str(local), "--format", "h5", "--quiet"]) == 0
    assert main(["batch", *files, "--out-dir", str(dask_out), "--format", "h5", "--engine", "dask",
                 "--processes", "2", "--quiet"]) == 0
    from core.events import EventTable
    for stem in ("r0", "r1"):
        a, b = EventTable.read_h5(local / f"{stem}.events.h5"), EventTable.read_h5(dask_out / f"{stem}.events.h5")
        assert len(a) > 0 and (a.sample == b.sample).all()


@pytest.mark.parametrize("args,msg", [
    (["--out-dir", "{d}/r0.bin"], "must be a folder"),
    (["--out-dir", "{d}/x/y"], "parent must exist"),
    (["--out-dir", "{d}/o2", "--processes", "0"], "process count"),
    (["--out-dir", "{d}/o3", "--threshold", "0"], "threshold must be above 0"),
])
def test_bad_options(recordings, capsys, args, msg):
    code = main(["batch", str(recordings / "r0.bin"), *[a.format(d=recordings) for a in args], "--quiet"])
    assert code == 2 and msg in capsys.readouterr().err


def test_duplicate_names_are_refused(recordings, tmp_path, capsys):
    (tmp_path / "sub").mkdir()
    write_synth(tmp_path / "sub" / "r0.bin", seconds=1, channels=4, seed=5)
    code = main(["batch", str(recordings / "r0.bin"), str(tmp_path / "sub" / "r0.bin"), "--out-dir",
                 str(tmp_path / "o"), "--quiet"])
    assert code == 2 and "distinct names" in capsys.readouterr().err
